"""benchfit profiles: list instrument profiles and check one."""

from __future__ import annotations

import argparse

from benchfit.cli.common import add_json_flag, emit
from benchfit.cli.values import text


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "profiles", help="list instrument profiles or check one",
        description="List the instrument profiles found in $BENCHFIT_PROFILES, the user folder "
                    "(~/.config/benchfit/profiles) and the shipped ones, each validated. "
                    "--check NAME|FILE validates one and exits 2 naming the first bad key.")
    p.add_argument("--check", type=text, metavar="NAME|FILE", help="validate one profile")
    add_json_flag(p)
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    from benchfit.bench.profile import find_profile, list_profiles, load_profile_file, search_dirs
    from benchfit.errors import InputError

    if args.check:
        prof = find_profile(args.check, option="--check")
        n = len(prof.commands)
        emit(args, {"ok": True, "profile": prof.to_dict()},
             f"ok: {prof.name} ({prof.kind}, {n} commands, {prof.encoding}) from {prof.source}")
        return 0
    rows = []
    for entry in list_profiles():
        row = entry.to_dict()
        try:
            prof = load_profile_file(entry.path)
            row.update(valid=True, kind=prof.kind, description=prof.description)
        except InputError as e:
            row.update(valid=False, error=str(e))
        rows.append(row)
    lines = []
    for r in rows:
        state = r.get("kind", "") if r["valid"] else f"INVALID: {r['error']}"
        note = " (shadowed)" if r["shadowed"] else ""
        lines.append(f"{r['name']:<24} {r['origin']:<8} {state}{note}  {r['path']}")
    folders = [str(f) for _, f in search_dirs()]
    emit(args, {"profiles": rows, "search_path": folders},
         "\n".join(lines) + "\nsearch path: " + ", ".join(folders))
    return 0
