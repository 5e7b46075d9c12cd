"""`benchfit check`: predict the loop with a given set of parts (e.g. what is on the board)."""

from __future__ import annotations

import argparse

from benchfit.cli.cmd_design import MAX_DRAWS, TOLERANCE
from benchfit.cli.common import add_json_flag, emit, warn
from benchfit.cli.values import (
    CAPACITANCE,
    NUMBER,
    POSITIVE,
    RESISTANCE,
    SEED,
    Unit,
    count,
    parse_value,
    quote,
    text,
)
from benchfit.errors import InputError


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "check", help="predict the margins of a design's parts (or changed parts) on a plant",
        description="Take the network, sensing and op-amp of a design file, optionally change "
                    "some parts, and predict the loop margins on the given plant(s) (default: the "
                    "plants the design was made for).")
    p.add_argument("plants", nargs="*", metavar="PLANT",
                   help="model JSON, fit-result JSON or sweep file (several = corners; FILE@TRACE picks "
                        "one trace of a file holding several)")
    p.add_argument("--design", required=True, type=text, metavar="JSON", help="design file from benchfit design")
    p.add_argument("--parts", type=text, metavar="R1=10k,C1=4.7n,...", help="parts to change (SI prefixes)")
    p.add_argument("--draws", type=count(0, MAX_DRAWS), default=0, metavar="N", help="Monte Carlo draws (default 0)")
    p.add_argument("--tolerance", type=TOLERANCE, metavar="R%:C%",
                   help="part tolerances in percent (default: the design's own, from its Monte Carlo or "
                        "its part series; the output says which)")
    p.add_argument("--seed", type=SEED, help="random seed for the Monte Carlo (default: the design's)")
    add_json_flag(p)
    p.set_defaults(func=run)


def part_unit(name: str) -> Unit:
    """What a part value is measured in, from its name: R1 ohms, C2 farads."""
    return {"R": RESISTANCE, "C": CAPACITANCE}.get(name[:1], NUMBER)


def parse_parts(text: str | None) -> dict[str, float]:
    out: dict[str, float] = {}
    for item in (text or "").split(","):
        if not item.strip():
            continue
        name, sep, value = item.partition("=")
        if not sep:
            raise InputError(f"{quote(item)}: expected NAME=VALUE, e.g. R1=10k", source="--parts")
        name = name.strip().upper()
        out[name] = parse_value(value, "--parts", part_unit(name), POSITIVE)
    return out


def run(args: argparse.Namespace) -> int:
    from benchfit.loop.checkdefaults import check_tolerances
    from benchfit.loop.design import Design, check_parts, with_parts
    from benchfit.loop.designfile import load_plant

    d = Design.from_json(args.design)
    net = with_parts(d.snapped.network, parse_parts(args.parts))
    if args.plants:
        corners = [load_plant(p, d.sensing) for p in args.plants]
    else:
        corners = list(d.corners)
    tol = check_tolerances(d, args.tolerance, args.seed)
    result = check_parts(corners, net, opamp=d.opamp, targets=d.targets, tolerances=(tol.r_tol, tol.c_tol),
                         draws=args.draws, seed=tol.seed,
                         sources=tuple(args.plants) + (args.design,))
    if not args.json:
        for w in result.warnings:
            warn(w)
    out = result.report().split("\nwarning: ")[0]
    if args.draws:
        varied = d.spread is not None and d.spread.plant_uncertainty and not any(
            getattr(lp, "draws", None) is not None for lp in corners)
        out += f"\ndrew the parts with {tol.text()}" + (
            "; the plant is not varied (the design file keeps no fit covariance; the design's own "
            "spread varied it too)" if varied else "")
    emit(args, {**result.to_dict(), "check_tolerances": tol.to_dict()}, out)
    return 0
