"""Lower layers never import upper ones (the rule in DEVELOPERS.md)."""

import ast
from pathlib import Path

import pytest

PKG = Path(__file__).resolve().parents[1] / "benchfit"

# layer rank: a module may import only from its own rank or lower.
RANK = {"errors": 0, "provenance": 0, "fileio": 0, "numfmt": 0, "safety": 0, "data": 1, "bench": 1,
        "fitting": 2, "loop": 3, "steps": 3, "output": 4, "planner": 4, "batch": 5, "cli": 6}


def _layer(parts: tuple[str, ...]) -> str | None:
    if len(parts) < 2 or parts[0] != "benchfit":
        return None
    return parts[1].removesuffix(".py")


def _imports(path: Path):
    tree = ast.parse(path.read_text(encoding="utf-8"))
    for node in ast.walk(tree):
        if isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            yield node.module
        elif isinstance(node, ast.Import):
            for a in node.names:
                yield a.name


@pytest.mark.parametrize("path", sorted(PKG.rglob("*.py")), ids=lambda p: str(p.relative_to(PKG)))
def test_no_upward_imports(path):
    rel = path.relative_to(PKG.parent).with_suffix("")
    own = _layer(rel.parts)
    if own not in RANK:
        return
    for mod in _imports(path):
        other = _layer(tuple(mod.split(".")))
        if other in RANK:
            assert RANK[other] <= RANK[own] or other == own, f"{rel} (layer {own}) imports {mod}"
    # steps and loop are siblings: steps may use loop results only through plain data.


def test_cli_start_is_light():
    """One command imports only its own module: `benchfit --version` pulls in no numerics."""
    import subprocess
    import sys

    code = ("import sys; from benchfit.cli import main\n"
            "try:\n    main(['--version'])\nexcept SystemExit:\n    pass\n"
            "heavy = [m for m in ('scipy', 'matplotlib', 'pandas', 'lmfit', 'pyvisa') if m in sys.modules]\n"
            "print('heavy=' + ','.join(heavy))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip().splitlines()[-1] == "heavy=", out.stdout


HEAVY = ("numpy", "scipy", "matplotlib", "pandas", "lmfit", "pyvisa")


def test_help_of_every_command_is_light():
    """`benchfit --help` and `benchfit COMMAND --help` for every command import no numerical library.

    Each command imports its library inside ``run``; building every parser must not (the
    issue measured 2.8 s and 1 664 modules for ``--help`` when it did).
    """
    import subprocess
    import sys

    code = ("import sys\n"
            "from benchfit.cli import build_parser, main\n"
            "def run(argv):\n"
            "    try:\n        main(argv)\n    except SystemExit:\n        pass\n"
            "run(['--help'])\n"
            "commands = sorted(build_parser()._subparsers._group_actions[0].choices)\n"
            "for c in commands:\n    run([c, '--help'])\n"
            f"heavy = [m for m in {HEAVY!r} if m in sys.modules]\n"
            "print('commands=' + ','.join(commands))\n"
            "print('heavy=' + ','.join(heavy))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    lines = out.stdout.strip().splitlines()
    commands = lines[-2].removeprefix("commands=").split(",")
    assert len(commands) >= 15 and "fit" in commands and "batch" in commands, lines[-2]
    assert lines[-1] == "heavy=", lines[-1]
