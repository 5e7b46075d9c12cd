"""Small helpers shared by the command modules (output form, option parsing)."""

from __future__ import annotations

import argparse
import sys
from typing import Any

from benchfit.errors import InputError
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


def parse_band(text: str | None, option: str = "--band") -> tuple[float | None, float | None]:
    """'FMIN:FMAX' (either side may be empty; k/M suffixes allowed) -> floats in Hz."""
    if text is None:
        return None, None
    lo, sep, hi = text.partition(":")
    if not sep:
        raise InputError(f"{text!r}: expected FMIN:FMAX in Hz, e.g. 100:1e6", source=option)
    return (parse_si(lo, option) if lo.strip() else None, parse_si(hi, option) if hi.strip() else None)


_SI = {"p": 1e-12, "n": 1e-9, "u": 1e-6, "µ": 1e-6, "m": 1e-3, "k": 1e3, "K": 1e3, "M": 1e6, "G": 1e9}


def parse_si(text: str, option: str) -> float:
    """'4.7k', '100n', '1e6', '2.2u' -> float (SI prefixes; a trailing unit letter is ignored)."""
    t = text.strip()
    for unit in ("Hz", "hz", "ohm", "Ohm", "Ω", "F", "s", "V"):
        if t.endswith(unit) and len(t) > len(unit):
            t = t[: -len(unit)]
            break
    mult = 1.0
    if t and t[-1] in _SI:
        mult = _SI[t[-1]]
        t = t[:-1]
    try:
        return float(t) * mult
    except ValueError:
        raise InputError(f"{text!r} is not a number (SI prefixes like 4.7k, 100n allowed)", source=option) from None
