"""`benchfit report`: one self-contained HTML page (and PDF) of a design and its evidence."""

from __future__ import annotations

import argparse
from pathlib import Path

from benchfit.cli.common import add_json_flag, emit
from benchfit.cli.values import CURRENT, NONZERO, output, text, value


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "report", help="write one self-contained HTML report of a design (optionally PDF too)",
        description="Write one HTML file holding everything about a design: inputs, the plant fit, "
                    "the part list (ideal and snapped), predicted margins with their spread, the "
                    "pictures and the warnings. It needs no network access to view.")
    p.add_argument("design", metavar="DESIGN_JSON", help="design file written by 'benchfit design'")
    p.add_argument("-o", "--output", type=output, metavar="HTML", help="report file (default: report.html beside the design)")
    p.add_argument("--pdf", action="store_true", help="also write the same report as PDF (same name, .pdf)")
    p.add_argument("--fit", type=text, metavar="FIT_JSON", help="the plant's fit result (parameter table, fit picture)")
    p.add_argument("--sweep", type=text, metavar="SWEEP", help="the measured plant sweep (measured-vs-model picture)")
    p.add_argument("--trace", type=text, metavar="TRACE", help="a measured reference step to overlay on the prediction")
    p.add_argument("--channel", type=text, help="channel of --trace holding the output (default: the first)")
    p.add_argument("--zout", type=text, metavar="FILE", help="open-loop output impedance: sweep or model JSON")
    p.add_argument("--load-trace", type=text, metavar="TRACE", help="a measured load step (output deviation)")
    p.add_argument("--load-channel", type=text, help="channel of --load-trace holding the output deviation")
    p.add_argument("--load-current-channel", type=text, metavar="CHANNEL",
                   help="channel of --load-trace holding the load current: the prediction is made for "
                        "the current step measured there")
    p.add_argument("--load-step", type=value(CURRENT, NONZERO), metavar="AMPS",
                   help="load-current step of the prediction, e.g. 1 or 500m (when the trace has no "
                        "current channel)")
    p.add_argument("--title", help="report title")
    add_json_flag(p)
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    from benchfit.cli.stage_design import is_stage_design, run_stage_report

    if is_stage_design(args.design):
        return run_stage_report(args)
    from benchfit.data import read_sweep, read_trace
    from benchfit.fitting.result import FitResult
    from benchfit.loop.design import Design
    from benchfit.output.assemble import assemble
    from benchfit.output.predicted import read_model_or_sweep
    from benchfit.output.report import default_report_path, write_report

    design = Design.from_json(args.design)
    fit = FitResult.from_json(args.fit) if args.fit else None
    sweep = read_sweep(args.sweep) if args.sweep else None
    trace = read_trace(args.trace) if args.trace else None
    load_trace = read_trace(args.load_trace) if args.load_trace else None
    zout = zout_model = None
    if args.zout:
        z = read_model_or_sweep(args.zout)
        zout_model, zout = (z, None) if hasattr(z, "poles") else (None, z)
    load_a = args.load_step
    inputs = assemble(design, fit=fit, sweep=sweep, step_trace=trace, step_channel=args.channel,
                      zout=zout, zout_model=zout_model, load_trace=load_trace,
                      load_channel=args.load_channel, load_current_channel=args.load_current_channel,
                      load_step_a=load_a, title=args.title)
    html_path = Path(args.output) if args.output else default_report_path(args.design)
    out = write_report(inputs, html_path, pdf_path=html_path.with_suffix(".pdf") if args.pdf else None)
    text = f"wrote {out['html']}" + (f" and {out['pdf']}" if out["pdf"] else "")
    emit(args, out, text)
    return 0
