"""Running a lot: find the sweeps, run the task on each (serially, in a process pool
or on Dask), append each row as it finishes, resume an interrupted lot.

All three paths submit :func:`benchfit.batch.task.run_task` with the same
settings and keep at most a small window of files in flight, so memory does
not grow with the lot: a sweep is read inside the task and dropped with it.
"""

from __future__ import annotations

import os
import sys
import time
from collections import deque
from collections.abc import Callable, Iterator, Sequence
from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, TextIO

from benchfit.batch.lotfiles import SWEEP_SUFFIXES, find_lot, find_sweeps  # noqa: F401 (re-exported)
from benchfit.batch.progress import Progress
from benchfit.batch.table import (
    columns,
    format_row,
    header_line,
    read_table,
    repair_torn_tail,
    write_parquet,
)
from benchfit.batch.task import TaskSettings, run_task, unit_id
from benchfit.errors import BenchfitError, InputError
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


# ----- execution paths: each yields rows as they finish, with a bounded window in flight -----
def _failed_row(path: str, exc: BaseException) -> dict[str, Any]:
    # The task itself never raises; this is a worker that died (killed, out of memory...).
    return {"file": path, "unit": unit_id(path), "status": "error",
            "error": f"worker failed ({type(exc).__name__}: {exc})".replace("\n", " ")}


def quiet_task(path: str, settings: TaskSettings) -> dict[str, Any]:
    """:func:`run_task` with numpy's floating-point notes (RuntimeWarning) dropped.

    In this process the CLI drops them; a pool or Dask worker prints straight to its stderr,
    so the task the workers run drops them itself.  Every value that matters is checked by
    the task and reported in its row.
    """
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        return run_task(path, settings)


def _serial(files: Sequence[str], settings: TaskSettings) -> Iterator[dict[str, Any]]:
    for p in files:
        yield run_task(p, settings)


def _pool(files: Sequence[str], settings: TaskSettings, workers: int,
          task: Callable[[str, TaskSettings], dict[str, Any]] = quiet_task) -> Iterator[dict[str, Any]]:
    """Rows from a local process pool, at most ``4 * workers`` files in flight.

    A worker that dies (killed, out of memory, a crash in native code) breaks the
    whole pool and fails every file in flight.  Those files are then re-run one
    at a time in a fresh pool, so the one that kills its worker is found and gets
    an error row, and the innocent ones get their real rows.  Workers ignore Ctrl-C:
    the parent stops the lot (closing this generator) and says which files are missing.
    """
    import multiprocessing as mp
    from concurrent.futures.process import BrokenProcessPool

    # forkserver: children start from a clean process, safe even when the parent
    # runs threads (a Dask client, a notebook); spawn where it is not available.
    method = "forkserver" if "forkserver" in mp.get_all_start_methods() else "spawn"
    queue = deque(files)
    suspects: deque[str] = deque()  # in flight when a pool broke: re-run one at a time
    while queue or suspects:
        with ProcessPoolExecutor(max_workers=workers, mp_context=mp.get_context(method),
                                 initializer=_worker_ignores_ctrl_c) as ex:
            running: dict[Any, str] = {}
            alone = _fill(ex, task, settings, running, queue, suspects, 4 * workers)
            broken = False
            try:
                while running:
                    finished, _ = wait(running, return_when=FIRST_COMPLETED)
                    for fut in finished:
                        path = running.pop(fut)
                        try:
                            row = fut.result()
                        except BrokenProcessPool as e:
                            broken = True
                            if path == alone:  # it broke the pool by itself: the culprit
                                yield _failed_row(path, e)
                            else:
                                suspects.append(path)
                            continue
                        except Exception as e:  # noqa: BLE001
                            row = _failed_row(path, e)
                        yield row
                    if not broken:
                        alone = _fill(ex, task, settings, running, queue, suspects, 4 * workers)
            except (GeneratorExit, KeyboardInterrupt):  # the lot stops: start nothing more
                ex.shutdown(wait=True, cancel_futures=True)
                raise


def _worker_ignores_ctrl_c() -> None:
    # Ctrl-C reaches the whole process group; the parent stops the lot and says what is
    # missing, so a worker must not die printing a KeyboardInterrupt traceback of its own.
    import signal

    signal.signal(signal.SIGINT, signal.SIG_IGN)


def _fill(ex, task, settings, running: dict, queue: deque, suspects: deque, window: int) -> str | None:
    """Submit work to the pool: one suspect by itself, else ordinary files up to ``window``.

    Returns the suspect running alone (None when ordinary files run).
    """
    if suspects:
        if running:
            return None
        path = suspects.popleft()
        running[ex.submit(task, path, settings)] = path
        return path
    while queue and len(running) < window:
        path = queue.popleft()
        running[ex.submit(task, path, settings)] = path
    return None


def _dask_client(address: Any):
    try:
        from distributed import Client
    except ImportError:
        raise InputError("running on Dask needs the 'distributed' package: "
                         "pip install 'benchfit[cluster]'", source="--dask") from None
    if hasattr(address, "submit"):  # already a client (notebooks, tests)
        return address, False
    try:
        return Client(str(address), timeout="10s"), True
    except (OSError, TimeoutError) as e:
        raise InputError(f"cannot reach a Dask scheduler at {address} ({e})", source="--dask") from None


#: How long a lot on Dask waits while the cluster has no worker, s (run_lot's default).
NO_WORKER_TIMEOUT_S = 60.0
#: How often the Dask loop looks at the cluster while nothing finishes, s.
_POLL_S = 0.5


class LotIncomplete(BenchfitError):
    """A lot stopped before every sweep had its row: which are missing, and how to finish.

    Attributes
    ----------
    missing
        The files with no row yet (in the lot's order).
    written, total
        Rows written by this run, files this run had to do.
    """

    def __init__(self, why: str, missing: Sequence[str], written: int, total: int, rows_csv: str,
                 *, exit_code: int = 2) -> None:
        self.missing, self.written, self.total = list(missing), written, total
        self.exit_code = exit_code
        names = ", ".join(Path(m).name for m in self.missing[:8])
        more = f" and {len(self.missing) - 8} more" if len(self.missing) > 8 else ""
        self.resume_hint = "run the same command with --resume to complete them"
        super().__init__(f"{why}: {written} of {total} sweeps written to {rows_csv}; "
                         f"{len(self.missing)} missing ({names}{more}); {self.resume_hint}")


def _no_worker_for(client: Any, since: float | None) -> float | None:
    """When the cluster was first seen without a worker (None while it has one).

    The evidence is the scheduler's own list of workers; a lot then waits for
    ``worker_timeout_s`` before it gives up, so a worker restarting or a cluster scaling
    up from zero has time to arrive.
    """
    try:
        n = len(client.scheduler_info().get("workers", {}))
    except Exception:  # noqa: BLE001 - the scheduler itself is gone: no worker either
        n = 0
    if n:
        return None
    return since if since is not None else time.monotonic()


def _dask(files: Sequence[str], settings: TaskSettings, address: Any,
          worker_timeout_s: float = NO_WORKER_TIMEOUT_S) -> Iterator[dict[str, Any]]:
    """Rows from a Dask cluster, at most ``4 * threads`` files in flight.

    Raises :class:`LotIncomplete` naming the files without a row when the cluster has had no
    worker for ``worker_timeout_s`` (it used to wait for ever, silently).
    """
    from distributed import wait as dask_wait

    client, owned = _dask_client(address)
    try:
        nworkers = max(1, sum(w.get("nthreads", 1)
                              for w in client.scheduler_info().get("workers", {}).values()))
        window = 4 * nworkers
        todo = deque(files)
        running: dict[Any, str] = {}
        idle_since: float | None = None
        while todo or running:
            while todo and len(running) < window:
                p = todo.popleft()
                running[client.submit(quiet_task, p, settings, pure=False)] = p
            try:
                done = dask_wait(list(running), timeout=_POLL_S, return_when="FIRST_COMPLETED").done
            except TimeoutError:
                done = set()
            if not done:
                idle_since = _no_worker_for(client, idle_since)
                if idle_since is not None and time.monotonic() - idle_since > worker_timeout_s:
                    left = set(running.values()) | set(todo)
                    raise LotIncomplete(
                        f"no Dask worker left for {worker_timeout_s:g} s",
                        [f for f in files if f in left], len(files) - len(left), len(files),
                        "the result table")
                continue
            idle_since = None
            for fut in done:
                path = running.pop(fut)
                try:
                    row = fut.result()
                except Exception as e:  # noqa: BLE001
                    row = _failed_row(path, e)
                fut.release()
                yield row
    finally:
        if owned:
            client.close()


def dask_workers(address: Any) -> int:
    """Worker threads on the cluster at ``address`` (a client or scheduler address)."""
    client, owned = _dask_client(address)
    try:
        return max(1, sum(w.get("nthreads", 1)
                          for w in client.scheduler_info().get("workers", {}).values()))
    finally:
        if owned:
            client.close()


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
        rows = _dask(todo, settings, dask, worker_timeout_s)
    else:
        nworkers = max(1, int(workers or os.cpu_count() or 1))
        nworkers = min(nworkers, max(1, len(todo)))
        if nworkers == 1:
            executor, rows = "serial", _serial(todo, settings)
        else:
            executor, rows = "pool", _pool(todo, settings, nworkers)
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
