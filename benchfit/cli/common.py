"""Small helpers shared by the command modules (output form, warnings); option values: values.py."""

from __future__ import annotations

import argparse
import sys
from typing import Any

from benchfit.fileio import to_json_text


def add_json_flag(p: argparse.ArgumentParser) -> None:
    p.add_argument("--json", action="store_true", help="print machine-readable JSON on stdout")


def emit(args: argparse.Namespace, data: dict[str, Any], text: str) -> None:
    """Print ``data`` as JSON when ``--json`` was given, else ``text``."""
    if getattr(args, "json", False):
        sys.stdout.write(to_json_text(data) + "\n")
    else:
        sys.stdout.write(text.rstrip("\n") + "\n")


def warn(message: str) -> None:
    """A warning line on stderr (never mixed into --json stdout)."""
    print(f"benchfit: warning: {message}", file=sys.stderr)


def warn_read(obj: Any, path: Any) -> Any:
    """Say on stderr what the reader warned of while reading ``path`` (skipped rows,
    repeats that disagree, units guessed...), so that a command that goes on to fit or judge
    the data does not hide it; return ``obj`` unchanged."""
    meta = getattr(obj, "meta", None)
    if isinstance(meta, dict):
        for w in meta.get("warnings", []) or []:
            warn(f"{path}: {w}")
    return obj
