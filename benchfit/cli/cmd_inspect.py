"""``benchfit inspect FILE``: read a sweep (or scope trace) and say what was understood.

Also home of the reader option flags shared with ``convert`` (:func:`add_reader_flags`,
:func:`reader_options`).
"""

from __future__ import annotations

import argparse
from typing import Any

from benchfit.cli.common import add_json_flag, emit
from benchfit.cli.values import POSITIVE, TIME, text, value
from benchfit.numfmt import FIT_DIGITS, eng


def add_reader_flags(p: argparse.ArgumentParser) -> None:
    """The override flags every command that reads a sweep or trace file accepts."""
    g = p.add_argument_group("reading the file (everything is detected; these override)")
    g.add_argument("--columns", type=text, metavar="LIST",
                   help="column meanings in order, e.g. freq,mag,phase or freq,db,deg or freq,re,im "
                        "(skip to ignore one); needed for a file with no header")
    g.add_argument("--trace", type=text, metavar="N|NAME", help="which trace when the file holds several")
    g.add_argument("--freq-unit", type=text, metavar="UNIT", help="frequency unit: Hz, kHz, MHz or GHz")
    m = g.add_mutually_exclusive_group()
    m.add_argument("--mag-db", dest="mag", action="store_const", const="db", help="magnitude is in dB")
    m.add_argument("--mag-linear", dest="mag", action="store_const", const="linear",
                   help="magnitude is linear")
    ph = g.add_mutually_exclusive_group()
    ph.add_argument("--phase-deg", dest="phase", action="store_const", const="deg",
                    help="phase is in degrees")
    ph.add_argument("--phase-rad", dest="phase", action="store_const", const="rad",
                    help="phase is in radians")
    g.add_argument("--param", type=text, metavar="NAME", help="Touchstone parameter, e.g. S21 (default) or S11")
    g.add_argument("--quantity", type=text, metavar="WHAT",
                   help="what was measured: plant, loop, closed, impedance, compensator")
    g.add_argument("--skip-bad-rows", action="store_true", default=None,
                   help="leave out rows that cannot be read (text among the numbers, #N/A, NaN, "
                        "9.91E37) instead of refusing the file; they are listed as skipped")
    t = p.add_argument_group("scope traces")
    t.add_argument("--channel", type=text, metavar="NAME|INDEX", help="keep one channel of a scope trace")
    t.add_argument("--time-unit", type=text, metavar="UNIT", help="time column unit: s, ms, us or ns")
    t.add_argument("--sample-interval", type=value(TIME, POSITIVE), metavar="DT",
                   help="sample interval when the trace has no time column (e.g. 1u, 2e-7)")


def reader_options(args: argparse.Namespace) -> dict[str, Any]:
    """The reader keyword arguments given on the command line (unset ones left out)."""
    opts = {
        "columns": args.columns, "trace": args.trace, "freq_unit": args.freq_unit,
        "mag": args.mag, "phase": args.phase, "param": args.param, "quantity": args.quantity,
        "channel": args.channel, "time_unit": args.time_unit,
        "sample_interval_s": getattr(args, "sample_interval", None),
        "skip_bad_rows": getattr(args, "skip_bad_rows", None),
    }
    return {k: v for k, v in opts.items() if v is not None}


def _fmt_si(x: float, unit: str) -> str:
    return eng(x, unit, FIT_DIGITS)


def summary_text(s: dict[str, Any]) -> str:
    """Human-readable form of :func:`benchfit.data.summary.summary`."""
    d = s.get("dialect", {})
    out = [f"file:      {s.get('source')}"]
    if s["kind"] == "sweep":
        out.append(f"sweep:     {s['points']} points, {_fmt_si(s['f_min_hz'], 'Hz')} .. "
                   f"{_fmt_si(s['f_max_hz'], 'Hz')}, quantity {s['quantity']}")
        mag = (f"{_fmt_si(s['magnitude_range'][0], 'Ω')} .. {_fmt_si(s['magnitude_range'][1], 'Ω')}"
               if s["quantity"] == "impedance" else
               f"{s['mag_db_range'][0]:.2f} .. {s['mag_db_range'][1]:.2f} dB")
        out.append(f"magnitude: {mag}; phase {s['phase_deg_range'][0]:.1f} .. "
                   f"{s['phase_deg_range'][1]:.1f} deg (unwrapped)")
        cols = ", ".join(f"{c['name']} -> {c['role']}" + (f" [{c['unit']}]" if c.get("unit") else "")
                         + (f" ({c['form']})" if c.get("form") not in (None, "auto") else "")
                         for c in s["columns"])
        out.append(f"columns:   {cols}")
    else:
        out.append(f"trace:     {s['samples']} samples, {_fmt_si(s['t_start_s'], 's')} .. "
                   f"{_fmt_si(s['t_end_s'], 's')}, every {_fmt_si(s['sample_interval_s'], 's')}")
        for name, c in s["channels"].items():
            out.append(f"channel:   {name} [{c['unit']}] {c['range'][0]:.4g} .. {c['range'][1]:.4g}")
    out.append("dialect:   " + ", ".join(f"{k}={v!r}" if isinstance(v, str) and len(v) == 1 else f"{k}={v}"
                                         for k, v in d.items()
                                         if v is not None and k not in ("traces",)))
    if d.get("traces") and len(d["traces"]) > 1:
        out.append("traces:    " + "; ".join(f"{i + 1} = {t}" for i, t in enumerate(d["traces"])))
    for w in s.get("warnings", []):
        out.append(f"warning:   {w}")
    return "\n".join(out)


def run(args: argparse.Namespace) -> int:
    from benchfit.data.summary import read_any, summary

    obj = read_any(args.file, **reader_options(args))
    s = summary(obj)
    emit(args, s, summary_text(s))
    return 0


def register(subparsers) -> None:
    p = subparsers.add_parser("inspect", help="read a sweep or scope file and show what was understood",
                              description="Read a sweep (any CSV/TSV dialect, Touchstone, canonical "
                                          "CSV) or a scope trace and print the columns, units, points, "
                                          "span, detected dialect and warnings.")
    p.add_argument("file", help="the file to read")
    add_reader_flags(p)
    add_json_flag(p)
    p.set_defaults(func=run)
