"""`benchfit design`: a compensation network with orderable parts, from the plant."""

from __future__ import annotations

import argparse
from typing import TYPE_CHECKING

from benchfit.cli.common import add_json_flag, emit, parse_si, warn
from benchfit.errors import InputError
from benchfit.loop.choices import METHODS

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
    p.add_argument("--file", metavar="TOML", help="design file (flags given here override it)")
    p.add_argument("--network", help="type1, type2, type3 or pi (default type2)")
    p.add_argument("--method", choices=METHODS, help="placement method (default k-factor)")
    p.add_argument("--crossover", metavar="HZ|auto", help="crossover frequency, or auto (default)")
    p.add_argument("--phase-margin", type=float, metavar="DEG", help="minimum phase margin (60)")
    p.add_argument("--gain-margin", type=float, metavar="DB", help="minimum gain margin (10)")
    p.add_argument("--r-in", metavar="OHM", help="input resistor R1 (default 10k)")
    p.add_argument("--opamp-gbw", metavar="HZ", help="op-amp gain-bandwidth (default: ideal op-amp)")
    p.add_argument("--opamp-gain", type=float, metavar="DB", help="op-amp DC gain (default 100 dB)")
    p.add_argument("--divider", metavar="RTOP:RBOT", help="sensing divider, e.g. 30k:10k")
    p.add_argument("--sensing-gain", type=float, metavar="G", help="plain sensing gain instead")
    p.add_argument("--series", metavar="R:C", help="E-series for resistors:capacitors (E24:E12)")
    p.add_argument("--tolerance", metavar="R%:C%", help="part tolerances in percent "
                   "(default: the series' tolerance)")
    p.add_argument("--draws", type=int, metavar="N", help="Monte Carlo draws (default 2000, 0 = none)")
    p.add_argument("--seed", type=int, help="random seed for the Monte Carlo")
    p.add_argument("--min-yield", metavar="PCT",
                   help="design for more margin until this percentage of the Monte Carlo draws "
                        "meets the targets (e.g. 95; default: design at the targets)")
    p.add_argument("-o", "--output", metavar="JSON", help="write the design here")
    add_json_flag(p)
    p.set_defaults(func=run)


def parse_pair(text: str, option: str) -> tuple[str, str]:
    a, sep, b = text.partition(":")
    if not sep or not a.strip() or not b.strip():
        raise InputError(f"{text!r}: expected two values separated by ':'", source=option)
    return a.strip(), b.strip()


def parse_tolerance(text: str) -> tuple[float, float]:
    """'1:10' or '1%:10%' (percent) -> fractions."""
    a, b = parse_pair(text, "--tolerance")
    try:
        return float(a.rstrip("%")) / 100.0, float(b.rstrip("%")) / 100.0
    except ValueError:
        raise InputError(f"{text!r}: expected R%:C% in percent, e.g. 1:10", source="--tolerance") from None


def spec_from_args(args: argparse.Namespace) -> DesignSpec:
    """The design file (if any) with the command-line flags laid over it."""
    from benchfit.loop.designfile import DesignSpec, merge_plant_files, read_design_file
    from benchfit.loop.opamp import OpAmp
    from benchfit.loop.sensing import Sensing
    from benchfit.loop.synthesis import Targets

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
        ch["r_in"] = parse_si(args.r_in, "--r-in")
    t = spec.targets
    if args.crossover is not None or args.phase_margin is not None or args.gain_margin is not None:
        fc = t.crossover_hz
        if args.crossover is not None:
            fc = None if args.crossover.strip().lower() == "auto" else parse_si(args.crossover,
                                                                                "--crossover")
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
            gbw_hz=parse_si(args.opamp_gbw, "--opamp-gbw") if args.opamp_gbw else base.gbw_hz,
            dc_gain_db=args.opamp_gain if args.opamp_gain is not None
            else (base.dc_gain_db if base else 100.0),
            second_pole_hz=base.second_pole_hz if base else None)
    if args.divider and args.sensing_gain is not None:
        raise InputError("give --divider or --sensing-gain, not both", source="--divider")
    if args.divider:
        top, bot = parse_pair(args.divider, "--divider")
        ch["sensing"] = Sensing.divider(parse_si(top, "--divider"), parse_si(bot, "--divider"))
    if args.sensing_gain is not None:
        ch["sensing"] = Sensing.plain(args.sensing_gain)
    if args.series:
        ch["series"] = parse_pair(args.series, "--series")
    if args.tolerance:
        ch["tolerances"] = parse_tolerance(args.tolerance)
    if args.draws is not None:
        if args.draws < 0:
            raise InputError(f"{args.draws}: expected a number of draws >= 0", source="--draws")
        ch["draws"] = args.draws
    if args.seed is not None:
        ch["seed"] = args.seed
    if args.min_yield is not None:
        ch["min_yield"] = parse_si(args.min_yield, "--min-yield") / 100.0
    return spec.with_changes(**ch)


def run(args: argparse.Namespace) -> int:
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
