"""``benchfit demo``: run benchfit on its sample data (first stage: read every sample file)."""

from __future__ import annotations

import argparse
from pathlib import Path

import benchfit
from benchfit.cli.common import add_json_flag, emit
from benchfit.data.summary import read_any, summary
from benchfit.errors import InputError

DATA_SUFFIXES = (".csv", ".tsv", ".txt", ".dat") + tuple(f".s{n}p" for n in range(1, 5))


def default_data_dir() -> Path:
    """sample_data/ next to the package (the repository root)."""
    return Path(benchfit.__file__).resolve().parents[1] / "sample_data"


def sample_files(folder: Path) -> list[Path]:
    """Every data file under ``folder`` (top level first, then sub-folders)."""
    files = [p for p in folder.rglob("*") if p.is_file() and p.suffix.lower() in DATA_SUFFIXES]
    return sorted(files, key=lambda p: (len(p.relative_to(folder).parts), str(p)))


def _row(rel: str, s: dict) -> str:
    if s["kind"] == "sweep":
        size = f"{s['points']:>6} pts"
        span = f"{s['f_min_hz']:.3g} .. {s['f_max_hz']:.3g} Hz"
        d = s["dialect"]
        how = d.get("format", "")
        if how == "table":
            how = f"{d['separator']}/{d['decimal']} {d['data_form']}"
        elif how.startswith("touchstone"):
            how = f"touchstone {d['parameter']} {d['data_form']}"
    else:
        size = f"{s['samples']:>6} smp"
        span = f"{s['t_start_s']:.3g} .. {s['t_end_s']:.3g} s"
        how = "trace " + ",".join(s["channels"])
    warn = f"  ({len(s['warnings'])} warning{'s' * (len(s['warnings']) != 1)})" if s["warnings"] else ""
    return f"{rel:<42} {s['kind']:<6} {size}  {span:<24} {how}{warn}"


def run(args: argparse.Namespace) -> int:
    folder = Path(args.data) if args.data else default_data_dir()
    if not folder.is_dir():
        raise InputError(f"no sample-data folder at {folder}; give one with --data DIR", source="--data")
    files = sample_files(folder)
    if not files:
        raise InputError(f"no data files in {folder}", source="--data")
    rows, results, failed = [], [], 0
    for path in files:
        rel = str(path.relative_to(folder))
        try:
            s = summary(read_any(path))
            s["file"] = rel
            rows.append(_row(rel, s))
        except InputError as e:
            failed += 1
            s = {"file": rel, "error": str(e)}
            rows.append(f"{rel:<42} error  {e}")
        results.append(s)
    text = [f"Reading the sample data in {folder}", "", *rows, "",
            f"{len(files) - failed} of {len(files)} files read."]
    emit(args, {"data_dir": str(folder), "files": results, "read": len(files) - failed,
                "failed": failed}, "\n".join(text))
    return 1 if failed else 0


def register(subparsers) -> None:
    p = subparsers.add_parser("demo", help="run benchfit on its sample data",
                              description="Read every sample file and summarise what benchfit "
                                          "understood of each.")
    p.add_argument("--data", metavar="DIR", help="sample-data folder (default: sample_data/ of the repo)")
    add_json_flag(p)
    p.set_defaults(func=run)
