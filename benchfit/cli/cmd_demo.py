"""``benchfit demo``: read every sample file, then take the sample scenario through the whole job.

Stage 1 reads each file in the sample-data folder and says what the reader
understood; stage 3 (:func:`benchfit.output.demo_stage.run_stage_demo`) designs the
second scenario, a reference buffer's feedback network in the 1/β picture; stage 2 (:func:`benchfit.output.demo.run_demo`) fits the buck
plant, designs a Type III network, spreads it over tolerances, predicts the
step and output impedance, reads the present board's step, and writes the
design, the fits, curves, a SPICE model and the HTML report into ``--out``.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

import benchfit
from benchfit.cli.common import add_json_flag, emit
from benchfit.cli.values import text
from benchfit.errors import InputError
from benchfit.numfmt import eng

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
        span = f"{eng(s['f_min_hz'], 'Hz')} to {eng(s['f_max_hz'], 'Hz')}"
        d = s["dialect"]
        how = d.get("format", "")
        if how == "table":
            how = f"{d['separator']}/{d['decimal']} {d['data_form']}"
        elif how.startswith("touchstone"):
            how = f"touchstone {d['parameter']} {d['data_form']}"
    else:
        size = f"{s['samples']:>6} smp"
        span = f"{eng(s['t_start_s'], 's')} to {eng(s['t_end_s'], 's')}"
        how = "trace " + ",".join(s["channels"])
    warn = f"  ({len(s['warnings'])} warning{'s' * (len(s['warnings']) != 1)})" if s["warnings"] else ""
    return f"{rel:<42} {s['kind']:<6} {size}  {span:<24} {how}{warn}"


def _read_all(folder: Path) -> tuple[list[str], list[dict], int]:
    from benchfit.data.summary import read_any, summary

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
    return rows, results, failed


def run(args: argparse.Namespace) -> int:
    from benchfit.output.demo import DemoScenario, run_demo

    folder = Path(args.data) if args.data else default_data_dir()
    if not folder.is_dir():
        raise InputError(f"no sample-data folder at {folder}; give one with --data DIR", source="--data")
    rows, results, failed = _read_all(folder)
    n = len(results)
    data = {"data_dir": str(folder), "files": results, "read": n - failed, "failed": failed}
    text = [f"Reading the sample data in {folder}", "", *rows, "", f"{n - failed} of {n} files read."]
    if failed or args.read_only:
        emit(args, data, "\n".join(text))
        return 1 if failed else 0
    quiet = args.json
    if not quiet:
        sys.stdout.write("\n".join(text) + "\n\nThe whole job on the buck scenario\n\n")
        sys.stdout.flush()

    def log(line: str) -> None:
        if not quiet:
            sys.stdout.write(line.rstrip("\n") + "\n")
            sys.stdout.flush()

    result = run_demo(folder, args.out, scenario=DemoScenario(), pdf=args.pdf, log=log)
    data["job"] = result.to_dict()
    if not quiet:
        sys.stdout.write("\nThe second scenario: a reference buffer into 22 uF (op-amp stage, 1/beta)\n\n")
    from benchfit.output.demo_stage import run_stage_demo

    data["stage_job"] = run_stage_demo(folder, args.out, log=log)
    report = Path(result.files["report"]).resolve()
    stage_files = data["stage_job"]["files"]
    emit(args, data, f"\nwrote {len(result.files)} files into {result.out_dir}/ in {result.seconds:.1f} s"
                     f" and {len(stage_files)} into {Path(stage_files['stage_report']).parent}/\n"
                     f"open the report: {report}\n"
                     f"and the reference buffer's: {Path(stage_files['stage_report']).resolve()}\n"
                     f"(both from {Path(stage_files['index']).resolve()})")
    return 0


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "demo", help="run the whole job on the sample data (no hardware, no network)",
        description="Read every sample file, then fit the sample buck plant, design a Type III network "
                    "for a 20 kHz crossover, snap the parts, spread them over tolerances, predict the "
                    "step and output impedance, read the present board's step, and write the design "
                    "and an HTML report into the output folder.")
    p.add_argument("--data", type=text, metavar="DIR", help="sample-data folder (default: sample_data/ of the repo)")
    p.add_argument("-o", "--out", type=text, default="benchfit-out", metavar="DIR",
                   help="output folder (default ./benchfit-out/)")
    p.add_argument("--pdf", action="store_true", help="also write the report as PDF")
    p.add_argument("--read-only", action="store_true", help="only read and list the sample files")
    add_json_flag(p)
    p.set_defaults(func=run)
