"""``benchfit fit SWEEP``: fit a pole/zero model (with delay) and print the parameter table."""

from __future__ import annotations

import argparse

from benchfit.cli.cmd_inspect import add_reader_flags, reader_options
from benchfit.cli.common import add_json_flag, emit, parse_band, parse_si, warn
from benchfit.errors import InputError


def _order(text: str) -> int | str:
    if text == "auto":
        return "auto"
    try:
        n = int(text)
    except ValueError:
        raise InputError(f"{text!r}: expected auto or a whole number >= 1", source="--order") from None
    if n < 1:
        raise InputError(f"{text!r}: expected auto or a whole number >= 1", source="--order")
    return n


def _delay(text: str) -> float | str:
    if text in ("auto", "none"):
        return text
    v = parse_si(text, "--delay")
    if v < 0:
        raise InputError(f"{text!r}: a delay cannot be negative", source="--delay")
    return v


def _fix(items: list[str] | None) -> dict[str, float]:
    out: dict[str, float] = {}
    for item in items or []:
        name, sep, value = item.partition("=")
        if not sep or not name.strip():
            raise InputError(f"{item!r}: expected name=value, e.g. zero1_hz=12k", source="--fix")
        out[name.strip()] = parse_si(value, "--fix")
    return out


def _bounds(items: list[str] | None) -> dict[str, tuple[float, float]]:
    """``NAME=LO:HI`` items (either side may be empty: no limit) -> {name: (lo, hi)}."""
    out: dict[str, tuple[float, float]] = {}
    for item in items or []:
        name, sep, rng = item.partition("=")
        lo_t, colon, hi_t = rng.partition(":")
        if not sep or not name.strip() or not colon or not (lo_t.strip() or hi_t.strip()):
            raise InputError(f"{item!r}: expected name=low:high, e.g. zero1_hz=5k:20k (either "
                             "side may be left empty)", source="--bound")
        lo = parse_si(lo_t, "--bound") if lo_t.strip() else -float("inf")
        hi = parse_si(hi_t, "--bound") if hi_t.strip() else float("inf")
        if not lo < hi:
            raise InputError(f"{item!r}: the low limit must be below the high one", source="--bound")
        out[name.strip()] = (lo, hi)
    return out


def _integrators(text: str) -> int | str:
    if text == "auto":
        return "auto"
    try:
        return int(text)
    except ValueError:
        raise InputError(f"{text!r}: expected auto or 0..3", source="--integrators") from None


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "fit", help="fit a pole/zero model with delay and uncertainties to a measured sweep",
        description="Fit a pole/zero model (vector fitting, then least-squares refinement of "
                    "gain, pole and zero frequencies, Q and delay with standard errors) to a "
                    "measured frequency response.")
    p.add_argument("sweep", metavar="SWEEP", help="sweep file (CSV/TSV of any common layout, Touchstone)")
    p.add_argument("--order", default="auto", type=str,
                   help="number of poles, or auto: raise it until the residual reaches the "
                        "noise floor (default auto)")
    p.add_argument("--delay", default="auto",
                   help="transport delay: auto (estimate and fit), none, or a known value in s "
                        "(e.g. 150n), held fixed")
    p.add_argument("--band", metavar="FMIN:FMAX", help="fit only this band, in Hz (e.g. 100:2M)")
    p.add_argument("--fix", metavar="NAME=VALUE", action="append",
                   help="hold a parameter at a value, e.g. zero1_hz=12k (repeatable)")
    p.add_argument("--bound", metavar="NAME=LO:HI", action="append",
                   help="keep a parameter within limits, e.g. zero1_hz=5k:20k or pair1_q=:10 "
                        "(repeatable)")
    p.add_argument("--weighting", choices=("relative", "absolute"), default="relative",
                   help="relative: errors in dB and degrees (default); absolute: complex error")
    p.add_argument("--integrators", default="0",
                   help="poles at the origin (a measured loop gain): 0..3 or auto (default 0)")
    p.add_argument("--stable", action=argparse.BooleanOptionalAction, default=None,
                   help="hold every pole in the left half-plane (default: only for passive data, "
                        "an impedance or a Touchstone S-parameter never above 1); --no-stable "
                        "lets the data put poles anywhere")
    p.add_argument("-o", "--output", metavar="MODEL.json", help="write the fit result as JSON")
    add_reader_flags(p)
    add_json_flag(p)
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    from benchfit.data import read_sweep
    from benchfit.fitting import fit

    band = parse_band(args.band)
    resp = read_sweep(args.sweep, **reader_options(args))
    result = fit(resp, order=_order(args.order), delay=_delay(args.delay),
                 band=None if band == (None, None) else band, fix=_fix(args.fix),
                 weighting=args.weighting, integrators=_integrators(args.integrators),
                 bounds=_bounds(args.bound), stable=args.stable)
    for w in result.warnings:
        warn(w)
    if args.output:
        result.to_json(args.output)
    emit(args, result.to_dict(), result.report(warnings=False))
    return 0
