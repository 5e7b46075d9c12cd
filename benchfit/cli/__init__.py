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
import re
import sys
import warnings
from collections.abc import Sequence

from benchfit import __version__
from benchfit.errors import BenchfitError

# argparse's "argument -o/--output: reason" for a value an option's type= refused
_BAD_VALUE = re.compile(r"argument (?:\S+/)?(-\S+): (.*)", re.S)


class _Parser(argparse.ArgumentParser):
    """argparse that reports a bad option on one line and exits 2.

    A value refused by an option's ``type=`` (:mod:`benchfit.cli.values`) is reported in the
    form of every other user error, ``benchfit: error: --option: reason``.
    """

    def __init__(self, *args, **kwargs):
        super().__init__(*args, **kwargs)
        # A value such as "-1u" or "-3dB" is a (negative) value, not an option: argparse's
        # own pattern takes only plain numbers, and "--delay -1u" said "expected one
        # argument" instead of what is wrong with the value.  No option name starts with
        # a digit, so nothing else is read differently.
        self._negative_number_matcher = re.compile(r"^-\.?\d")

    def error(self, message: str):  # noqa: D401
        m = _BAD_VALUE.fullmatch(message)
        # the line already starts "benchfit: error:"; a sub-command's parser adds its name
        command = self.prog.removeprefix("benchfit").strip()
        where = (f"{m.group(1)}: {m.group(2)}" if m
                 else f"{command}: {message}" if command else message)
        self.exit(2, "benchfit: error: " + " ".join(where.split("\n")) + "\n")


def _command_modules() -> list[str]:
    pkg = importlib.import_module("benchfit.cli")
    return sorted(m.name for m in pkgutil.iter_modules(pkg.__path__) if m.name.startswith("cmd_"))


def build_parser(only: Sequence[str] | None = None) -> argparse.ArgumentParser:
    """The argument parser; ``only`` limits it to some command modules (for a fast start)."""
    parser = _Parser(prog="benchfit", description="Fit bench frequency responses and design loop compensation.")
    parser.add_argument("--version", action="version", version=f"benchfit {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    for name in (only if only is not None else _command_modules()):
        mod = importlib.import_module(f"benchfit.cli.{name}")
        mod.register(sub)
    return parser


def _fast_parser(argv: Sequence[str]) -> argparse.ArgumentParser | None:
    """A parser holding only the module of the command named in ``argv``, when it can be found.

    Importing every command module pulls in scipy, matplotlib, pandas and lmfit;
    a single command needs only its own, so start-up stays short.
    """
    if list(argv) == ["--version"]:
        return build_parser(only=[])
    words = [a for a in argv if not a.startswith("-")]
    if not words or argv[0].startswith("-"):
        return None
    word = words[0]
    modules = _command_modules()
    for cand in (f"cmd_{word.replace('-', '_')}", f"cmd_{word.split('-')[0]}"):
        if cand in modules:
            parser = build_parser(only=[cand])
            choices = parser._subparsers._group_actions[0].choices  # type: ignore[union-attr]
            if word in choices:
                return parser
    return None


def _show_warning(message, category, filename, lineno, file=None, line=None) -> None:
    """Where a Python warning raised inside a command goes.

    A RuntimeWarning is numpy's note on a floating-point event (``divide by zero encountered
    in log10``, ``invalid value``, ``overflow``): the libraries check the values that matter
    and say so in their own warnings, so the note is dropped rather than printed as a
    two-line Python warning.  Any other warning is one ``benchfit: warning:`` line.
    """
    if issubclass(category, RuntimeWarning):
        return
    text = " ".join(str(message).split())
    print(f"benchfit: warning: {text[:300]}", file=sys.stderr)


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the ``benchfit`` console command; returns the exit status."""
    argv = list(sys.argv[1:] if argv is None else argv)
    parser = _fast_parser(argv) or build_parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as e:  # --help, --version, or a bad option already reported
        return e.code if isinstance(e.code, int) else 2
    if not getattr(args, "func", None):
        parser.print_help()
        return 2
    args.command_line = argv  # a command can say the exact command that continues it
    try:
        with warnings.catch_warnings():
            warnings.showwarning = _show_warning
            return int(args.func(args) or 0)
    except BenchfitError as e:
        print(f"benchfit: error: {e}", file=sys.stderr)
        return e.exit_code
    except KeyboardInterrupt:
        print("benchfit: interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:
        return 0
