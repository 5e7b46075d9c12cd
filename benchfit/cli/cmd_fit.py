"""``benchfit fit SWEEP``: fit a pole/zero model (with delay) and print the parameter table."""

from __future__ import annotations

import argparse

from benchfit.cli.cmd_inspect import add_reader_flags, reader_options
from benchfit.cli.common import add_json_flag, emit, warn, warn_read
from benchfit.cli.values import (
    FREQUENCY,
    NON_NEGATIVE,
    NUMBER,
    TIME,
    Range,
    Unit,
    band,
    count,
    output,
    parse_range,
    parse_value,
    quote,
    text,
    value,
)
from benchfit.errors import InputError

#: --order: a number of poles, or auto
ORDER = count(1, words=("auto",))
#: --delay: auto (estimate and fit), none, or a known delay in s
DELAY = value(TIME, NON_NEGATIVE, words=("auto", "none"))


def parameter_unit(name: str) -> Unit:
    """What a fit parameter is measured in, from its name: ``*_hz`` hertz, ``*_s`` seconds."""
    if name.endswith("_hz"):
        return FREQUENCY
    if name.endswith("_s"):
        return TIME
    return NUMBER


def _fix(items: list[str] | None) -> dict[str, float]:
    out: dict[str, float] = {}
    for item in items or []:
        name, sep, v = item.partition("=")
        if not sep or not name.strip():
            raise InputError(f"{quote(item)}: expected name=value, e.g. zero1_hz=12k", source="--fix")
        value = parse_value(v, "--fix", parameter_unit(name.strip()), Range())
        if name.strip() in out:
            raise InputError(f"{quote(name.strip())} is given twice ({out[name.strip()]:g} and "
                             f"{value:g}); give it once", source="--fix")
        out[name.strip()] = value
    return out


def _bounds(items: list[str] | None) -> dict[str, tuple[float, float]]:
    """``NAME=LO:HI`` items (either side may be empty: no limit) -> {name: (lo, hi)}."""
    out: dict[str, tuple[float, float]] = {}
    for item in items or []:
        name, sep, rng = item.partition("=")
        if not sep or not name.strip() or ":" not in rng or not rng.replace(":", "").strip():
            raise InputError(f"{quote(item)}: expected name=low:high, e.g. zero1_hz=5k:20k (either "
                             "side may be left empty)", source="--bound")
        lo, hi = parse_range(rng, "--bound", parameter_unit(name.strip()), Range())
        lo = -float("inf") if lo is None else lo
        hi = float("inf") if hi is None else hi
        if not lo < hi:
            raise InputError(f"{quote(item)}: the low limit must be below the high one", source="--bound")
        if name.strip() in out:
            raise InputError(f"{quote(name.strip())} is given twice; give it once", source="--bound")
        out[name.strip()] = (lo, hi)
    return out


def _conflicts(delay: float | str, fix: dict[str, float],
               bounds: dict[str, tuple[float, float]]) -> None:
    """Refuse options that ask for two different things (one line naming both).

    ``--delay none`` (no delay) against a fixed or bounded ``delay_s`` (a delay), a known
    ``--delay S`` against another ``--fix delay_s``, and a parameter both fixed and bounded:
    the fit would honour one silently and drop the other.
    """
    both = sorted(set(fix) & set(bounds))
    if both:
        raise InputError(f"{quote(both[0])} is both fixed (--fix) and bounded (--bound); give one",
                         source="--bound")
    if "delay_s" in fix or "delay_s" in bounds:
        given = "--fix delay_s" if "delay_s" in fix else "--bound delay_s"
        if delay == "none":
            raise InputError(f"none asks for no delay, {given} for one; give one of them",
                             source="--delay")
        if not isinstance(delay, str):
            raise InputError(f"{delay:g} s already holds the delay fixed; {given} asks again; "
                             "give one of them", source="--delay")


#: --integrators: poles at the origin, 0..3, or auto
INTEGRATORS = count(0, 3, words=("auto",))


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "fit", help="fit a pole/zero model with delay and uncertainties to a measured sweep",
        description="Fit a pole/zero model (vector fitting, then least-squares refinement of "
                    "gain, pole and zero frequencies, Q and delay with standard errors) to a "
                    "measured frequency response.")
    p.add_argument("sweep", metavar="SWEEP", help="sweep file (CSV/TSV of any common layout, Touchstone)")
    p.add_argument("--order", default="auto", type=ORDER,
                   help="number of poles, or auto: raise it until the residual reaches the "
                        "noise floor (default auto)")
    p.add_argument("--delay", default="auto", type=DELAY,
                   help="transport delay: auto (estimate and fit), none, or a known value in s "
                        "(e.g. 150n), held fixed")
    p.add_argument("--band", type=band, metavar="FMIN:FMAX", help="fit only this band, in Hz (e.g. 100:2M)")
    p.add_argument("--fix", type=text, metavar="NAME=VALUE", action="append",
                   help="hold a parameter at a value, e.g. zero1_hz=12k (repeatable)")
    p.add_argument("--bound", type=text, metavar="NAME=LO:HI", action="append",
                   help="keep a parameter within limits, e.g. zero1_hz=5k:20k or pair1_q=:10 "
                        "(repeatable)")
    p.add_argument("--weighting", choices=("relative", "absolute"), default="relative",
                   help="relative: errors in dB and degrees (default); absolute: complex error")
    p.add_argument("--integrators", type=INTEGRATORS, default="0",
                   help="poles at the origin (a measured loop gain): 0..3 or auto (default 0)")
    p.add_argument("--stable", action=argparse.BooleanOptionalAction, default=None,
                   help="hold every pole in the left half-plane (default: only for passive data, "
                        "an impedance or a Touchstone S-parameter never above 1); --no-stable "
                        "lets the data put poles anywhere")
    p.add_argument("-o", "--output", type=output, metavar="MODEL.json", help="write the fit result as JSON")
    add_reader_flags(p)
    add_json_flag(p)
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    from benchfit.data import read_sweep
    from benchfit.fitting import fit

    fix, bounds = _fix(args.fix), _bounds(args.bound)
    _conflicts(args.delay, fix, bounds)
    resp = warn_read(read_sweep(args.sweep, **reader_options(args)), args.sweep)
    result = fit(resp, order=args.order, delay=args.delay, band=args.band, fix=fix,
                 weighting=args.weighting, integrators=args.integrators, bounds=bounds,
                 stable=args.stable)
    for w in result.warnings:
        warn(w)
    if args.output:
        result.to_json(args.output)
    emit(args, result.to_dict(), result.report(warnings=False))
    return 0
