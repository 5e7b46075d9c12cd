"""Running a lot: find the sweeps, run the task on each (serially, in a process pool
or on Dask), append each row as it finishes, resume an interrupted lot.

All three paths submit :func:`benchfit.batch.task.run_task` with the same
settings and keep at most a small window of files in flight, so memory does
not grow with the lot: a sweep is read inside the task and dropped with it.
The paths are in :mod:`benchfit.batch.paths`; here are the lot's record
(:class:`LotRun`), its rows file and resume, and :func:`run_lot`.
"""

from __future__ import annotations

import os
import sys
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, TextIO

from benchfit.batch.lotfiles import SWEEP_SUFFIXES, find_lot, find_sweeps  # noqa: F401 (re-exported)
from benchfit.batch.paths import (  # noqa: F401 (LotIncomplete, quiet_task, NO_WORKER_TIMEOUT_S re-exported)
    NO_WORKER_TIMEOUT_S,
    LotIncomplete,
    dask_rows,
    dask_workers,
    pool_rows,
    quiet_task,
    serial_rows,
)
from benchfit.batch.progress import Progress
from benchfit.batch.table import (
    columns,
    format_row,
    header_line,
    read_table,
    repair_torn_tail,
    write_parquet,
)
from benchfit.batch.task import TaskSettings
from benchfit.errors import InputError
from benchfit.fileio import append_lines_durable, write_text_atomic
from benchfit.provenance import Provenance


@dataclass(frozen=True)
class LotRun:
    """What one run of a lot did.

    Parameters
    ----------
    output
        The result table written (CSV or Parquet).
    rows_csv
        The CSV the rows were streamed into (the output itself for CSV).
    files
        Files in the lot.
    resumed
        Files skipped because a previous run had finished them.
    ran
        Files run now.
    counts
        Rows of this run by status (pass, fail, measured, error).
    seconds
        Wall time of this run, s.
    workers
        Parallel workers used (1 for serial).
    executor
        ``"serial"``, ``"pool"`` or ``"dask"``.
    provenance
        The lot's settings.
    """

    output: str
    rows_csv: str
    files: int
    resumed: int
    ran: int
    counts: dict[str, int]
    seconds: float
    workers: int
    executor: str
    provenance: Provenance = field(default_factory=lambda: Provenance(step="batch"))

    @property
    def seconds_per_sweep(self) -> float:
        """Wall time per file run now (s); nan when none ran."""
        return self.seconds / self.ran if self.ran else float("nan")

    def to_dict(self) -> dict[str, Any]:
        return {
            "kind": "lot_run", "output": self.output, "rows_csv": self.rows_csv,
            "files": self.files, "resumed": self.resumed, "ran": self.ran,
            "counts": dict(self.counts), "seconds": self.seconds, "workers": self.workers,
            "executor": self.executor, "provenance": self.provenance.to_dict(),
        }

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> LotRun:
        return cls(output=d["output"], rows_csv=d["rows_csv"], files=int(d["files"]),
                   resumed=int(d["resumed"]), ran=int(d["ran"]),
                   counts={k: int(v) for k, v in d["counts"].items()},
                   seconds=float(d["seconds"]), workers=int(d["workers"]),
                   executor=str(d["executor"]), provenance=Provenance.from_dict(d.get("provenance")))


# ----- the lot ----------------------------------------------------------------------------------
def rows_path_for(output: str | os.PathLike) -> Path:
    """Where rows stream to: the output CSV itself, or ``<output>.rows.csv`` for Parquet."""
    out = Path(output)
    return out.with_name(out.name + ".rows.csv") if out.suffix.lower() == ".parquet" else out


def _norm(p: str) -> str:
    return os.path.normcase(os.path.abspath(p))


def _prepare(rows_csv: Path, cols: list[str], resume: bool) -> set[str]:
    """Start or resume the row file; return the files already done."""
    if rows_csv.exists() and rows_csv.stat().st_size > 0:
        if not resume:
            raise InputError("exists; pass --resume to continue that lot, or remove it",
                             source=str(rows_csv))
        repair_torn_tail(rows_csv)
        old_cols, rows = read_table(rows_csv)
        if not old_cols:
            append_lines_durable(rows_csv, [header_line(cols)])
            return set()
        if old_cols != cols:
            raise InputError(f"has columns {old_cols[len(old_cols) - 3:]}... that differ from this "
                             "lot's (other limits or --param?); use the same settings or a new -o",
                             source=str(rows_csv))
        return {_norm(r["file"]) for r in rows}
    write_text_atomic(rows_csv, header_line(cols))  # then rows are appended durably
    return set()


def run_lot(files: Sequence[str], settings: TaskSettings, output: str | os.PathLike, *,
            workers: int | None = None, dask: Any = None, resume: bool = False,
            progress: TextIO | None = sys.stderr,
            on_row: Callable[[dict[str, Any]], None] | None = None,
            worker_timeout_s: float = NO_WORKER_TIMEOUT_S) -> LotRun:
    """Run every file of a lot and write the result table.

    Parameters
    ----------
    files
        Sweep files (see :func:`find_sweeps`).
    settings
        Fit options, design, limits and reported parameters.
    output
        Result table, ``.csv`` or ``.parquet``.  Rows are appended to the CSV
        (for Parquet, ``<output>.rows.csv``) as they finish; Parquet is
        written at the end, atomically, sorted by file.
    workers
        Local processes; None for ``os.cpu_count()``; 1 runs in this process.
    dask
        A Dask scheduler address (``tcp://host:port``) or a ``distributed.Client``;
        when given, ``workers`` is ignored.
    resume
        Continue an existing row file: files already in it are skipped, and a
        last line torn by a kill is cut first.  Without it an existing output
        is an error, so a finished lot is never overwritten by accident.
    progress
        Stream for the progress line (None for silence).
    on_row
        Called with each row once it is written (a notebook's live view, a benchmark's probe).
    worker_timeout_s
        On Dask: give up when the cluster has had no worker this long.

    Raises
    ------
    LotIncomplete
        Interrupted (Ctrl-C, exit status 130) or no Dask worker left: names the files
        without a row; every row written before is kept and ``resume`` completes the lot.

    Returns
    -------
    LotRun
    """
    cols = columns(settings.param_names)
    rows_csv = rows_path_for(output)
    done = _prepare(rows_csv, cols, resume)
    todo = [f for f in files if _norm(f) not in done]
    if dask is not None:
        executor, nworkers = "dask", dask_workers(dask)
        rows = dask_rows(todo, settings, dask, worker_timeout_s)
    else:
        nworkers = max(1, int(workers or os.cpu_count() or 1))
        nworkers = min(nworkers, max(1, len(todo)))
        if nworkers == 1:
            executor, rows = "serial", serial_rows(todo, settings)
        else:
            executor, rows = "pool", pool_rows(todo, settings, nworkers)
    bar = Progress(len(todo), stream=progress)
    counts: dict[str, int] = {}
    t0 = time.perf_counter()
    written: set[str] = set()
    try:
        for row in rows:
            append_lines_durable(rows_csv, [format_row(row, cols)])
            written.add(row["file"])
            counts[row["status"]] = counts.get(row["status"], 0) + 1
            bar.update(row["status"])
            if on_row is not None:
                on_row(row)
    except (KeyboardInterrupt, LotIncomplete) as e:
        bar.close()
        rows.close()  # a Dask client or a process pool is shut down here, not left behind
        why = "interrupted" if isinstance(e, KeyboardInterrupt) else str(e).split(":")[0]
        try:  # the table is the record: a row written just before the interrupt counts
            written |= {_norm(r["file"]) for r in read_table(rows_csv)[1]}
        except InputError:
            pass  # a torn last line: the rows this run counted
        missing = [f for f in todo if f not in written and _norm(f) not in written]
        raise LotIncomplete(why, missing, len(todo) - len(missing), len(todo), str(rows_csv),
                            exit_code=130 if why == "interrupted" else 2) from None
    bar.close()
    seconds = time.perf_counter() - t0
    if Path(output).suffix.lower() == ".parquet":
        table_cols, table_rows = read_table(rows_csv)
        write_parquet(table_cols, sorted(table_rows, key=lambda r: r["file"]), output)
    return LotRun(output=str(output), rows_csv=str(rows_csv), files=len(files),
                  resumed=len(files) - len(todo), ran=len(todo), counts=counts,
                  seconds=seconds, workers=nworkers, executor=executor,
                  provenance=Provenance(step="batch", sources=tuple(files[:1]) + (
                      (f"... {len(files)} files",) if len(files) > 1 else ()),
                      settings={**settings.describe(), "workers": nworkers,
                                "executor": executor}))
