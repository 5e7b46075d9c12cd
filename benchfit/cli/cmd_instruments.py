"""benchfit instruments: list VISA resources and, optionally, ask each one *IDN?."""

from __future__ import annotations

import argparse

from benchfit.cli.common import add_json_flag, emit
from benchfit.cli.values import TIME, Range, text, value


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "instruments", help="list VISA resources (and their *IDN? answers)",
        description="List the resources the VISA backend finds. With the pure-Python @py backend, "
                    "finding LAN instruments sends a discovery broadcast on your local network; "
                    "use --query to narrow the search (e.g. 'USB?*::INSTR').")
    p.add_argument("--identify", action="store_true", help="open each resource and ask *IDN?")
    p.add_argument("--backend", type=text, default="@py", help="pyvisa backend (default @py)")
    p.add_argument("--query", type=text, default="?*::INSTR", help="VISA resource pattern (default ?*::INSTR)")
    p.add_argument("--timeout", type=value(TIME, Range(gt=0, le=600)), default=2.0, metavar="S",
                   help="timeout per identify query in s (default 2)")
    add_json_flag(p)
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    from benchfit.bench.instruments import identify_all, list_resources

    names = list_resources(args.backend, args.query)
    found = identify_all(names, args.backend, timeout_s=args.timeout) if args.identify else \
        [{"resource": n} for n in names]
    lines = []
    for entry in found:
        line = entry["resource"]
        if "idn" in entry:
            line += f"  {entry['idn']}"
        if "error" in entry:
            line += f"  (no answer: {entry['error']})"
        lines.append(line)
    emit(args, {"backend": args.backend, "query": args.query, "resources": found},
         "\n".join(lines) if lines else f"no VISA resources found by {args.backend} for {args.query!r}")
    return 0
