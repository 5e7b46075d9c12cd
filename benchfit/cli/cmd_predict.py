"""`benchfit predict`: one predicted curve of a design as CSV."""

from __future__ import annotations

import argparse

from benchfit.cli.common import add_json_flag, emit
from benchfit.cli.values import CURRENT, NONZERO, VOLTAGE, output, text, value
from benchfit.numfmt import eng
from benchfit.output.choices import CURVE_NAMES, WHICH


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "predict", help="write a predicted curve of a design (loop, closed, step, zout, load step) as CSV",
        description="Predict one curve of a design's loop with its snapped (or ideal) parts and write "
                    "it as CSV: frequency curves as freq_hz,re,im,magnitude,mag_db,phase_deg; time "
                    "curves as time_s,value.")
    p.add_argument("design", metavar="DESIGN_JSON", help="design file written by 'benchfit design'")
    p.add_argument("--curve", required=True, choices=CURVE_NAMES, help="which curve")
    p.add_argument("-o", "--output", required=True, type=output, metavar="CSV", help="file to write")
    p.add_argument("--parts", default="snapped", choices=WHICH, help="snapped (default) or ideal parts")
    p.add_argument("--zout", type=text, metavar="FILE",
                   help="open-loop output impedance: sweep or model JSON (for load_step a sweep is fitted first)")
    p.add_argument("--step", type=value(VOLTAGE, NONZERO), default="1", metavar="VOLTS", help="reference step at the reference input (1 V)")
    p.add_argument("--load-step", type=value(CURRENT, NONZERO), default="1", metavar="AMPS", help="load-current step (1 A)")
    add_json_flag(p)
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    from benchfit.cli.stage_design import is_stage_design, run_stage_predict

    if is_stage_design(args.design):
        return run_stage_predict(args)
    from benchfit.loop.design import Design
    from benchfit.output.curves import write_curve_csv
    from benchfit.output.predicted import design_curve, read_model_or_sweep

    design = Design.from_json(args.design)
    z_open = read_model_or_sweep(args.zout) if args.zout else None
    curve = design_curve(design, args.curve, which=args.parts, z_open=z_open,
                         reference_step_v=args.step, load_step_a=args.load_step)
    path = write_curve_csv(curve, args.output)
    axis = "Hz" if curve.is_frequency else "s"
    emit(args, {"output": str(path), "curve": args.curve, "name": curve.name, "points": int(curve.x.size),
                "x_name": curve.x_name, "x_min": float(curve.x[0]), "x_max": float(curve.x[-1])},
         f"wrote {path}: {curve.name}, {curve.x.size} points, {eng(float(curve.x[0]), axis)} to "
         f"{eng(float(curve.x[-1]), axis)}"
         + (" (the plant's measured band)" if curve.is_frequency and "band_hz" in curve.provenance.settings
            else ""))
    return 0
