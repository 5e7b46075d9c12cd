"""`benchfit batch`: fit and judge every sweep of a production lot."""

from __future__ import annotations

import argparse
import shlex
import sys
from pathlib import Path

from benchfit.cli.cmd_fit import DELAY, ORDER  # the same option forms as `benchfit fit`
from benchfit.cli.common import add_json_flag, emit, warn
from benchfit.cli.values import POSITIVE, TIME, band, count, output, text, value
from benchfit.errors import InputError


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "batch", help="fit and judge every sweep of a lot (process pool or Dask)",
        description="Read every sweep of a lot, measure margins (straight from loop sweeps, or "
                    "from a fit times the design's compensator), judge each unit against limits, "
                    "and write one row per sweep.")
    p.add_argument("lot", metavar="FOLDER_OR_GLOB", help="folder of sweeps, or a glob pattern")
    p.add_argument("--design", type=text, metavar="DESIGN_JSON",
                   help="design file: its snapped compensator and sensing close the loop of plant sweeps")
    p.add_argument("--limits", type=text, metavar="LIMITS_TOML", help="limits every unit must meet")
    p.add_argument("--workers", type=count(1), metavar="N",
                   help="local worker processes (default: number of cores; 1 = no pool)")
    p.add_argument("--dask", type=text, metavar="ADDRESS", help="run on a Dask cluster, e.g. tcp://host:8786")
    p.add_argument("-o", "--output", type=output, default="results.csv", metavar="RESULTS",
                   help="result table, .csv or .parquet (default results.csv)")
    p.add_argument("--resume", action="store_true",
                   help="continue an interrupted lot: skip files already in the output")
    p.add_argument("--summary", type=output, metavar="SUMMARY_JSON", help="write the lot summary as JSON")
    p.add_argument("--histograms", type=output, metavar="PNG", help="write histograms of each figure")
    p.add_argument("--param", type=text, action="append", default=[], metavar="NAME",
                   help="also report this fitted parameter in its own column (repeatable)")
    p.add_argument("--quantity", choices=("plant", "loop"),
                   help="treat every sweep as this (default: each file's own header)")
    p.add_argument("--order", type=ORDER, default="auto", help="fit order: auto or a number of poles")
    p.add_argument("--delay", type=DELAY, default="auto", help="fit delay: auto, none or seconds (e.g. 1u)")
    p.add_argument("--band", type=band, metavar="FMIN:FMAX", help="fit only this band, Hz")
    p.add_argument("--worker-timeout", type=value(TIME, POSITIVE), default=60.0, metavar="S",
                   help="with --dask: give up when the cluster has had no worker this long "
                        "(default 60 s); the message names the sweeps left and the --resume")
    p.add_argument("--quiet", action="store_true", help="no progress line")
    add_json_flag(p)
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    from benchfit.batch.limits import Limits, read_limits
    from benchfit.batch.runner import LotIncomplete, find_lot, rows_path_for, run_lot
    from benchfit.batch.summary import plot_histograms, summarise
    from benchfit.batch.table import read_table
    from benchfit.batch.task import TaskSettings, read_design_loop
    from benchfit.fileio import write_json_atomic

    out = Path(args.output)
    if out.suffix.lower() not in (".csv", ".parquet"):
        raise InputError(f"{args.output!r}: expected a .csv or .parquet file name", source="-o")
    if args.dask and args.workers is not None:
        warn("--workers is ignored with --dask (the cluster has its own workers)")
    settings = TaskSettings(
        order=args.order, delay=args.delay, band=args.band, quantity=args.quantity,
        design=read_design_loop(args.design) if args.design else None,
        limits=read_limits(args.limits) if args.limits else Limits(),
        params=tuple(args.param))
    rows_csv = rows_path_for(out)
    # the lot's own inputs and outputs may sit in its folder; they are not sweeps
    own = [p for p in (out, rows_csv, args.design, args.summary, args.histograms, args.limits) if p]
    lot = find_lot(args.lot, exclude=own)
    files = lot.files
    if lot.skipped:
        warn(lot.skipped_line())
    try:
        run_info = run_lot(files, settings, out, workers=args.workers, dask=args.dask,
                           resume=args.resume, progress=None if args.quiet else sys.stderr,
                           worker_timeout_s=args.worker_timeout)
    except LotIncomplete as e:
        argv = [a for a in getattr(args, "command_line", []) if a != "--resume"]
        if argv:  # the exact command that completes the lot
            again = shlex.join(["benchfit", *argv, "--resume"])
            e.args = (str(e).replace(e.resume_hint, f"complete them with: {again}"),)
        raise
    _, rows = read_table(rows_csv)
    summary = summarise(rows, source=str(rows_csv))
    if args.summary:
        write_json_atomic(args.summary, summary)
    if args.histograms:
        plot_histograms(rows, args.histograms, limits=settings.limits)
    text = [summary.report(),
            f"{run_info.ran} sweeps run in {run_info.seconds:.1f} s on {run_info.workers} "
            f"{'worker' if run_info.workers == 1 else 'workers'} ({run_info.executor})"
            + (f", {run_info.resumed} already done" if run_info.resumed else ""),
            f"wrote {out}"]
    emit(args, {"run": run_info.to_dict(), "summary": summary.to_dict()}, "\n".join(text))
    return 0
