"""``benchfit margins LOOP``: phase, gain, delay and modulus margins, every crossing."""

from __future__ import annotations

import argparse

from benchfit.cli.cmd_inspect import add_reader_flags, reader_options
from benchfit.cli.common import add_json_flag, emit, parse_band, parse_si, warn
from benchfit.errors import InputError


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "margins", help="stability margins of a loop gain (sweep, model, fit result or design)",
        description="Phase margin, gain margin, delay margin, modulus margin and every gain and "
                    "phase crossing of a loop gain T (the return ratio). LOOP is a measured "
                    "loop-gain sweep, a model or fit-result JSON, or a design JSON (its snapped "
                    "loop). Closed-loop stability is decided by the Nyquist encirclement count.")
    p.add_argument("loop", metavar="LOOP", help="sweep file or JSON (model, fit result, design)")
    p.add_argument("--unstable-poles", type=int, metavar="N",
                   help="open-loop right-half-plane poles (default: counted from a model, 0 for a sweep)")
    p.add_argument("--band", metavar="FMIN:FMAX", help="restrict to this band in Hz (k/M allowed)")
    p.add_argument("--delay", metavar="S", help="add a pure delay to the loop, e.g. 2u")
    p.add_argument("--ideal", action="store_true", help="for a design: use the ideal parts, not snapped")
    add_reader_flags(p)
    add_json_flag(p)
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    from benchfit.loop.loopfile import margins_of_loop, read_loop

    opts = {k: v for k, v in reader_options(args).items()
            if k not in ("channel", "time_unit", "sample_interval_s")}
    loop = read_loop(args.loop, which="ideal" if args.ideal else "snapped", **opts)
    if args.unstable_poles is not None and args.unstable_poles < 0:
        raise InputError(f"{args.unstable_poles}: expected a count >= 0", source="--unstable-poles")
    band = parse_band(args.band) if args.band else None
    delay = parse_si(args.delay, "--delay") if args.delay else 0.0
    m = margins_of_loop(loop, unstable_open_loop_poles=args.unstable_poles, band=band,
                        extra_delay_s=delay)
    data = m.to_dict()
    data["source"] = str(args.loop)
    if not args.json:
        for w in m.warnings:
            warn(w)
    emit(args, data, m.report().split("\nwarning: ")[0])
    return 0
