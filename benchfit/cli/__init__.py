"""Command line: argument parsing only; each command calls the library and prints.

Commands live one per module, ``benchfit/cli/cmd_<name>.py``, each with a
``register(subparsers)`` function that adds its parser and sets
``func(args) -> int``.  They are found automatically, so adding a command
touches no other file.
"""

from __future__ import annotations

import argparse
import importlib
import pkgutil
import sys
from collections.abc import Sequence

from benchfit import __version__
from benchfit.errors import BenchfitError


class _Parser(argparse.ArgumentParser):
    """argparse that reports a bad option on one line and exits 2."""

    def error(self, message: str):  # noqa: D401
        self.exit(2, f"benchfit: error: {self.prog}: {message}\n")


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(prog="benchfit", description="Fit bench frequency responses and design loop compensation.")
    parser.add_argument("--version", action="version", version=f"benchfit {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    pkg = importlib.import_module("benchfit.cli")
    for info in sorted(pkgutil.iter_modules(pkg.__path__), key=lambda m: m.name):
        if info.name.startswith("cmd_"):
            mod = importlib.import_module(f"benchfit.cli.{info.name}")
            mod.register(sub)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the ``benchfit`` console command; returns the exit status."""
    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "func", None):
        parser.print_help()
        return 2
    try:
        return int(args.func(args) or 0)
    except BenchfitError as e:
        print(f"benchfit: error: {e}", file=sys.stderr)
        return e.exit_code
    except KeyboardInterrupt:
        print("benchfit: interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:
        return 0
