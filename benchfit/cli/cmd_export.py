"""`benchfit export-spice`: a model (or a design's plant/compensator) as a SPICE subcircuit."""

from __future__ import annotations

import argparse

from benchfit.cli.common import add_json_flag, emit
from benchfit.cli.values import output, text
from benchfit.output.choices import DESIGN_PARTS


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "export-spice", help="write a fitted model as a SPICE subcircuit (R, C, E, G, T only)",
        description="Write a model as a SPICE3 subcircuit '.SUBCKT NAME in out' built from "
                    "resistors, capacitors, controlled sources and (for a delay) a matched "
                    "lossless line, so any SPICE simulator can use the measured plant.")
    p.add_argument("model", metavar="MODEL_JSON", help="model, fit result or design JSON")
    p.add_argument("-o", "--output", required=True, type=output, metavar="CIR", help="netlist file to write")
    p.add_argument("--name", type=text, help="subcircuit name (default: the --part name, e.g. plant)")
    p.add_argument("--part", default="plant", choices=DESIGN_PARTS,
                   help="for a design file: which model to export (default plant)")
    add_json_flag(p)
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    from benchfit.output.spice import model_from_file, write_spice

    model = model_from_file(args.model, args.part)
    name = args.name or args.part.replace("-", "_")
    path = write_spice(model, args.output, name)
    emit(args, {"output": str(path), "name": name, "order": model.order,
                "zeros": len(model.zeros), "delay_s": model.delay_s},
         f"wrote {path}: .SUBCKT {name} in out ({model.order} poles, {len(model.zeros)} "
         f"zero{'' if len(model.zeros) == 1 else 's'}, delay {model.delay_s:g} s)")
    return 0
