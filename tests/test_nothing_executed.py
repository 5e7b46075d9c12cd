"""Nothing read is ever executed: no pickle, eval/exec, marshal, shelve or object-building YAML.

Rule from the project brief (JSON and TOML only); checked on the source tree by AST.
"""

import ast
from pathlib import Path

import pytest

PKG = Path(__file__).resolve().parents[1] / "benchfit"
FORBIDDEN_MODULES = {"pickle", "cPickle", "dill", "marshal", "shelve", "yaml", "cloudpickle"}
FORBIDDEN_CALLS = {"eval", "exec", "compile", "__import__"}


@pytest.mark.parametrize("path", sorted(PKG.rglob("*.py")), ids=lambda p: str(p.relative_to(PKG)))
def test_no_code_execution_paths(path):
    tree = ast.parse(path.read_text(encoding="utf-8"))
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            for a in node.names:
                assert a.name.split(".")[0] not in FORBIDDEN_MODULES, f"{path}: imports {a.name}"
        elif isinstance(node, ast.ImportFrom) and node.module:
            assert node.module.split(".")[0] not in FORBIDDEN_MODULES, f"{path}: imports {node.module}"
        elif isinstance(node, ast.Call):
            fn = node.func
            if isinstance(fn, ast.Name):
                assert fn.id not in FORBIDDEN_CALLS, f"{path}:{node.lineno}: calls {fn.id}()"
            for kw in node.keywords:
                if kw.arg == "shell" and isinstance(kw.value, ast.Constant):
                    assert kw.value.value is not True, f"{path}:{node.lineno}: shell=True"
