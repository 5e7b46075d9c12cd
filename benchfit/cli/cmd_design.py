"""`benchfit design`: a compensation network with orderable parts, from the plant."""

from __future__ import annotations

import argparse
from typing import TYPE_CHECKING

from benchfit.cli.common import add_json_flag, emit, warn
from benchfit.cli.stage_design import add_stage_args, refuse_stray_stage_options, run_stage
from benchfit.cli.values import (
    ANGLE,
    DECIBEL,
    FREQUENCY,
    NUMBER,
    PERCENT,
    RESISTANCE,
    SEED,
    Range,
    argtype,
    count,
    output,
    pair,
    parse_range,
    quote,
    text,
    value,
)
from benchfit.errors import InputError
from benchfit.loop.choices import METHODS

#: most Monte Carlo draws a command asks for (each draw is a full loop prediction)
MAX_DRAWS = 1_000_000

if TYPE_CHECKING:
    from benchfit.loop.designfile import DesignSpec


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "design", help="design a Type I/II/III or PI compensation network from a plant",
        description="Place a compensation network's poles and zeros on the plant (fitted model, "
                    "fit result, or a sweep fitted on the fly), snap the parts to E-series values, "
                    "re-verify the loop with the real op-amp, and spread it over part tolerances. "
                    "Several PLANTs are corners (load, temperature): the targets must hold on all.")
    p.add_argument("plants", nargs="*", metavar="PLANT",
                   help="model JSON, fit-result JSON or sweep file (several = corners; FILE@TRACE picks "
                        "one trace of a file holding several)")
    p.add_argument("--file", type=text, metavar="TOML", help="design file (flags given here override it)")
    p.add_argument("--network", type=text, help="type1, type2, type3 or pi (default type2)")
    p.add_argument("--method", choices=METHODS, help="placement method (default k-factor)")
    p.add_argument("--crossover", type=value(FREQUENCY, words=("auto",)), metavar="HZ|auto", help="crossover frequency, or auto (default)")
    p.add_argument("--phase-margin", type=value(ANGLE, Range(gt=0, lt=180)), metavar="DEG", help="minimum phase margin (60)")
    p.add_argument("--gain-margin", type=value(DECIBEL, Range(ge=0)), metavar="DB", help="minimum gain margin (10)")
    p.add_argument("--r-in", type=value(RESISTANCE), metavar="OHM", help="input resistor R1 (default 10k)")
    p.add_argument("--opamp-gbw", type=value(FREQUENCY), metavar="HZ", help="op-amp gain-bandwidth (default: ideal op-amp)")
    p.add_argument("--opamp-gain", type=value(DECIBEL, Range(gt=0)), metavar="DB", help="op-amp DC gain (default 100 dB)")
    p.add_argument("--divider", type=pair(RESISTANCE, form="RTOP:RBOT"), metavar="RTOP:RBOT", help="sensing divider, e.g. 30k:10k")
    p.add_argument("--sensing-gain", type=value(NUMBER), metavar="G", help="plain sensing gain instead")
    p.add_argument("--series", type=text, metavar="R:C", help="E-series for resistors:capacitors (E24:E12)")
    p.add_argument("--tolerance", type=TOLERANCE, metavar="R%:C%", help="part tolerances in percent "
                   "(default: the series' tolerance)")
    p.add_argument("--draws", type=count(0, MAX_DRAWS), metavar="N", help="Monte Carlo draws (default 2000, 0 = none)")
    p.add_argument("--seed", type=SEED, help="random seed for the Monte Carlo")
    p.add_argument("--min-yield", type=value(PERCENT, Range(gt=0, le=100)), metavar="PCT",
                   help="design for more margin until this percentage of the Monte Carlo draws "
                        "meets the targets (e.g. 95; default: design at the targets)")
    p.add_argument("--count-crossings", type=COUNTED, metavar="WHICH",
                   help="crossings that must meet the targets (targets met, snapping, yield): "
                        "all (default: every gain crossing the phase margin, every phase "
                        "crossing the gain margin), main, or a band FMIN:FMAX")
    p.add_argument("-o", "--output", type=output, metavar="JSON", help="write the design here")
    add_stage_args(p)
    add_json_flag(p)
    p.set_defaults(func=run)


def _counted(t: str) -> str | tuple[float, float]:
    """``all``, ``main`` or a band FMIN:FMAX (both ends) for --count-crossings."""
    if t.strip().lower() in ("all", "main"):
        return t.strip().lower()
    lo, hi = parse_range(t, None, FREQUENCY, form="FMIN:FMAX", open_ends=False)
    if not lo < hi:
        raise InputError(f"{quote(t)}: expected FMIN below FMAX")
    return (lo, hi)


COUNTED = argtype(_counted, "crossings")


def parse_pair(text: str, option: str) -> tuple[str, str]:
    a, sep, b = text.partition(":")
    if not sep or not a.strip() or not b.strip():
        raise InputError(f"{quote(text)}: expected two values separated by ':'", source=option)
    return a.strip(), b.strip()


def _tolerance(text: str) -> tuple[float, float]:
    r, c = parse_range(text, None, PERCENT, Range(ge=0, lt=100), open_ends=False, form="R%:C%")
    return r / 100.0, c / 100.0


#: --tolerance R%:C%: part tolerances in percent ('1:10' or '1%:10%') -> fractions
TOLERANCE = argtype(_tolerance, "tolerance")


def spec_from_args(args: argparse.Namespace) -> DesignSpec:
    """The design file (if any) with the command-line flags laid over it."""
    from benchfit.loop.designfile import DesignSpec, merge_plant_files, read_design_file
    from benchfit.loop.opamp import OpAmp
    from benchfit.loop.sensing import Sensing
    from benchfit.loop.targets import Targets

    spec = read_design_file(args.file) if args.file else DesignSpec()
    spec = merge_plant_files(spec, args.plants)
    if not spec.plant_files:
        raise InputError("give at least one PLANT file (or plant.files in --file)", source="PLANT")
    ch: dict = {}
    if args.network:
        ch["kind"] = args.network
    if args.method:
        ch["method"] = args.method
    if args.r_in:
        ch["r_in"] = args.r_in
    t = spec.targets
    if args.crossover is not None or args.phase_margin is not None or args.gain_margin is not None:
        fc = t.crossover_hz
        if args.crossover is not None:
            fc = None if args.crossover == "auto" else args.crossover
        ch["targets"] = Targets(
            crossover_hz=fc,
            phase_margin_deg=t.phase_margin_deg if args.phase_margin is None else args.phase_margin,
            gain_margin_db=t.gain_margin_db if args.gain_margin is None else args.gain_margin)
    if args.opamp_gbw or args.opamp_gain is not None:
        base = spec.opamp
        if args.opamp_gbw is None and base is None:
            raise InputError("--opamp-gain needs --opamp-gbw (or an [opamp] in the design file)",
                             source="--opamp-gain")
        ch["opamp"] = OpAmp(
            gbw_hz=args.opamp_gbw if args.opamp_gbw else base.gbw_hz,
            dc_gain_db=args.opamp_gain if args.opamp_gain is not None
            else (base.dc_gain_db if base else 100.0),
            second_pole_hz=base.second_pole_hz if base else None)
    if args.divider and args.sensing_gain is not None:
        raise InputError("give --divider or --sensing-gain, not both", source="--divider")
    if args.divider:
        ch["sensing"] = Sensing.divider(*args.divider)
    if args.sensing_gain is not None:
        ch["sensing"] = Sensing.plain(args.sensing_gain)
    if args.series:
        ch["series"] = parse_pair(args.series, "--series")
    if args.tolerance:
        ch["tolerances"] = args.tolerance
    if args.draws is not None:
        ch["draws"] = args.draws
    if args.seed is not None:
        ch["seed"] = args.seed
    if args.min_yield is not None:
        ch["min_yield"] = args.min_yield / 100.0
    if args.count_crossings is not None:
        ch["crossings"] = args.count_crossings
    return spec.with_changes(**ch)


def run(args: argparse.Namespace) -> int:
    if args.stage:
        return run_stage(args)
    refuse_stray_stage_options(args)
    result = spec_from_args(args).run()
    if args.output:
        result.to_json(args.output)
    if not args.json:
        for w in result.warnings:
            warn(w)
    text = result.report().split("\nwarning: ")[0]  # warnings went to stderr
    if args.output:
        text += f"\nwrote {args.output}"
    emit(args, result.to_dict(), text)
    return 0
