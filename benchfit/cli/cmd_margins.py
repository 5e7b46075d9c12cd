"""``benchfit margins LOOP``: phase, gain, delay and modulus margins, every crossing."""

from __future__ import annotations

import argparse

from benchfit.cli.cmd_inspect import add_reader_flags, reader_options
from benchfit.cli.common import add_json_flag, emit, warn
from benchfit.cli.values import NON_NEGATIVE, TIME, band, count, value


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "margins", help="stability margins of a loop gain (sweep, model, fit result or design)",
        description="Phase margin, gain margin, delay margin, modulus margin and every gain and "
                    "phase crossing of a loop gain T (the return ratio). LOOP is a measured "
                    "loop-gain sweep, a model or fit-result JSON, or a design JSON (its snapped "
                    "loop). Closed-loop stability is decided by the Nyquist encirclement count.")
    p.add_argument("loop", metavar="LOOP", help="sweep file or JSON (model, fit result, design)")
    p.add_argument("--unstable-poles", type=count(0), metavar="N",
                   help="open-loop right-half-plane poles (default: counted from a model, 0 for a sweep)")
    p.add_argument("--band", type=band, metavar="FMIN:FMAX", help="restrict to this band in Hz (k/M allowed)")
    p.add_argument("--delay", type=value(TIME, NON_NEGATIVE), default=0.0, metavar="S", help="add a pure delay to the loop, e.g. 2u")
    p.add_argument("--ideal", action="store_true", help="for a design: use the ideal parts, not snapped")
    add_reader_flags(p)
    add_json_flag(p)
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    from benchfit.loop.loopfile import margins_of_loop, read_loop

    opts = {k: v for k, v in reader_options(args).items()
            if k not in ("channel", "time_unit", "sample_interval_s")}
    loop = read_loop(args.loop, which="ideal" if args.ideal else "snapped", **opts)
    m = margins_of_loop(loop, unstable_open_loop_poles=args.unstable_poles, band=args.band,
                        extra_delay_s=args.delay)
    data = m.to_dict()
    data["source"] = str(args.loop)
    if not args.json:
        for w in m.warnings:
            warn(w)
    emit(args, data, m.report().split("\nwarning: ")[0])
    return 0
