"""The ``--stage`` path of `benchfit design`: an op-amp stage's feedback network from its Aol.

Kept out of cmd_design.py so the converter path stays as it was; cmd_design adds
these options (:func:`add_stage_args`) and hands over to :func:`run_stage` when
``--stage`` is given.
"""

from __future__ import annotations

import argparse

from benchfit.cli.common import emit, warn
from benchfit.cli.values import CAPACITANCE, FREQUENCY, NUMBER, RESISTANCE, Range, value
from benchfit.errors import InputError

STAGE_NETWORKS = ("auto", "plain", "lead", "lag", "lag-lead", "isolation", "snubber")


def add_stage_args(p: argparse.ArgumentParser) -> None:
    """Options of the op-amp stage path."""
    g = p.add_argument_group("op-amp stage (--stage): PLANT is the measured or fitted Aol of "
                             "op-amp + output stage + load; --network is one of "
                             + ", ".join(STAGE_NETWORKS))
    g.add_argument("--stage", choices=("noninverting", "inverting"),
                   help="design an op-amp stage's feedback network instead of a converter's "
                        "compensator")
    g.add_argument("--closed-loop-gain", type=value(NUMBER, Range(nonzero=True)), metavar="G",
                   help="DC closed-loop gain (non-inverting >= 1; inverting: -G or G), checked "
                        "after snapping to 1 %%")
    g.add_argument("--output-resistance", type=value(RESISTANCE, Range(ge=0)), metavar="OHM",
                   help="op-amp open-loop output resistance Ro (needed by isolation and snubber)")
    g.add_argument("--load-cap", type=value(CAPACITANCE, Range(gt=0)), metavar="F",
                   help="load capacitance CL")
    g.add_argument("--load-esr", type=value(RESISTANCE, Range(ge=0)), metavar="OHM",
                   help="load capacitor ESR (default 0)")
    g.add_argument("--gain-band", type=value(FREQUENCY), metavar="HZ",
                   help="also check the closed-loop gain stays within 1 %% of --closed-loop-gain up "
                        "to this frequency")
    g.add_argument("--lag-at", choices=("across", "ground"),
                   help="lag R-C across the inputs (default; keeps the signal gain) or V- to ground")


def refuse_stray_stage_options(args: argparse.Namespace) -> None:
    """A stage option given without --stage is a mistake, not something to ignore."""
    for name in ("closed_loop_gain", "output_resistance", "load_cap", "load_esr", "lag_at",
                 "gain_band"):
        if getattr(args, name, None) is not None:
            raise InputError("is an op-amp stage option; add --stage noninverting or inverting",
                             source="--" + name.replace("_", "-"))


def run_stage(args: argparse.Namespace) -> int:
    """Design the stage the options describe, print it, write it with -o."""
    from benchfit.cli.cmd_design import parse_pair
    from benchfit.loop.designfile import load_plant
    from benchfit.loop.stage import design_stage
    from benchfit.loop.stage_load import StageLoad
    from benchfit.loop.stage_networks import check_stage_kind
    from benchfit.loop.targets import Targets

    if args.file:
        raise InputError("a design file describes a converter loop; give the stage's options on "
                         "the command line", source="--file")
    if len(args.plants) != 1:
        raise InputError(f"{len(args.plants)} PLANT files given; a stage takes one Aol (sweep, "
                         "model or fit result)", source="PLANT")
    if args.closed_loop_gain is None:
        raise InputError("a stage needs --closed-loop-gain (its DC gain is set by the same "
                         "network)", source="--closed-loop-gain")
    for name in ("opamp_gbw", "divider", "sensing_gain", "crossover", "method"):
        if getattr(args, name, None) is not None:
            raise InputError("does not apply to a stage: the op-amp is the plant and the "
                             "crossover follows from the network", source="--" + name.replace("_", "-"))
    kind = args.network or "auto"
    kind = kind if kind.strip().lower() == "auto" else check_stage_kind(kind)
    gain = args.closed_loop_gain if args.stage == "noninverting" else -abs(args.closed_loop_gain)
    load = StageLoad(ro_ohm=args.output_resistance or 0.0, c_f=args.load_cap,
                     esr_ohm=args.load_esr or 0.0)
    targets = Targets(phase_margin_deg=60.0 if args.phase_margin is None else args.phase_margin,
                      gain_margin_db=10.0 if args.gain_margin is None else args.gain_margin)
    lp = load_plant(args.plants[0])
    d = design_stage(lp, kind.strip().lower() if kind.strip().lower() == "auto" else kind, targets,
                     gain=gain, stage=args.stage, load=load, r_level=args.r_in or 10e3,
                     lag_at=args.lag_at or "across",
                     series=parse_pair(args.series, "--series") if args.series else ("E24", "E12"),
                     tolerances=args.tolerance or (None, None),
                     draws=2000 if args.draws is None else args.draws, seed=args.seed,
                     sources=tuple(args.plants), gain_band_hz=args.gain_band,
                     min_yield=None if args.min_yield is None else args.min_yield / 100.0)
    if args.output:
        d.to_json(args.output)
    if not args.json:
        for w in d.warnings:
            warn(w)
    text = d.report().split("\nwarning: ")[0]
    if args.output:
        text += f"\nwrote {args.output}"
    emit(args, d.to_dict(), text)
    return 0


def is_stage_design(path: str) -> bool:
    """True when ``path`` is a JSON file of kind 'stage_design' (report and predict hand over)."""
    import json

    try:
        with open(path, encoding="utf-8") as fh:
            head = fh.read(200_000)
        return json.loads(head).get("kind") == "stage_design"
    except (OSError, ValueError, AttributeError):
        return False  # the command's own reader reports what is wrong with the file


def run_stage_report(args: argparse.Namespace) -> int:
    """`benchfit report` of a stage design: one HTML page (no PDF)."""
    from pathlib import Path

    from benchfit.data import read_sweep, read_trace
    from benchfit.loop.stage import StageDesign
    from benchfit.output.stage_report import write_stage_report

    if args.pdf or args.fit or args.zout:
        raise InputError("a stage report takes --trace, --load-trace, --sweep (measured closed "
                         "loop), --load-step and --title", source="--pdf" if args.pdf else
                         ("--fit" if args.fit else "--zout"))
    d = StageDesign.from_json(args.design)
    out = Path(args.output) if args.output else Path(args.design).with_name("report.html")
    res = write_stage_report(d, out, title=args.title,
                             step_trace=read_trace(args.trace) if args.trace else None,
                             step_channel=args.channel,
                             load_trace=read_trace(args.load_trace) if args.load_trace else None,
                             load_channel=args.load_channel,
                             measured_closed=read_sweep(args.sweep) if args.sweep else None,
                             load_step_a=args.load_step or 0.01)
    emit(args, res, f"wrote {res['html']}")
    return 0


def run_stage_predict(args: argparse.Namespace) -> int:
    """`benchfit predict` of a stage design: one curve as CSV."""
    from benchfit.loop.stage import StageDesign
    from benchfit.output.curves import write_curve_csv
    from benchfit.output.plot_stage import stage_curve

    if args.zout:
        raise InputError("a stage design knows its output impedance from the load it was "
                         "designed with", source="--zout")
    d = StageDesign.from_json(args.design)
    curve = stage_curve(d, args.curve, which=args.parts, step_v=args.step, load_step_a=args.load_step)
    path = write_curve_csv(curve, args.output)
    emit(args, {"output": str(path), "curve": args.curve, "name": curve.name,
                "points": int(curve.x.size)}, f"wrote {path}: {curve.name}, {curve.x.size} points")
    return 0
