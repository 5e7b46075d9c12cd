"""``benchfit convert FILE -o OUT.csv``: write a sweep (or trace) as benchfit's canonical CSV."""

from __future__ import annotations

import argparse

from benchfit.cli.cmd_inspect import add_reader_flags, reader_options
from benchfit.cli.common import add_json_flag, emit
from benchfit.cli.values import output


def run(args: argparse.Namespace) -> int:
    from benchfit.data import FrequencyResponse, write_sweep_csv, write_trace_csv
    from benchfit.data.summary import read_any, summary

    obj = read_any(args.file, **reader_options(args))
    if isinstance(obj, FrequencyResponse):
        path = write_sweep_csv(obj, args.output)
    else:
        path = write_trace_csv(obj, args.output)
    s = summary(obj)
    s["output"] = str(path)
    what = f"{s['points']} points" if s["kind"] == "sweep" else f"{s['samples']} samples"
    emit(args, s, f"wrote {path} ({s['kind']}, {what})"
         + "".join(f"\nwarning:   {w}" for w in s["warnings"]))
    return 0


def register(subparsers) -> None:
    p = subparsers.add_parser("convert", help="write a sweep or trace as canonical CSV",
                              description="Read a sweep or scope file in any supported dialect and "
                                          "write benchfit's canonical CSV (freq_hz,re,im[,stddev]"
                                          "[,weight][,coherence] or time_s,channels...) atomically.")
    p.add_argument("file", help="the file to read")
    p.add_argument("-o", "--output", required=True, type=output, metavar="OUT.csv", help="canonical CSV to write")
    add_reader_flags(p)
    add_json_flag(p)
    p.set_defaults(func=run)
