"""The three ways a lot's task runs: serially, in a local process pool, on a Dask cluster.

Each path yields result rows as they finish and keeps at most a small window of
files in flight (``4 ×`` workers or threads).  The pool re-runs alone the files
that were in flight when a worker died, so the one that kills its worker is
found; the Dask path gives up with :class:`LotIncomplete` when the cluster has
had no worker for a while.  :func:`benchfit.batch.runner.run_lot` chooses the
path and writes the rows.
"""

from __future__ import annotations

import time
from collections import deque
from collections.abc import Callable, Iterator, Sequence
from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
from pathlib import Path
from typing import Any

from benchfit.batch.task import TaskSettings, run_task, unit_id
from benchfit.errors import BenchfitError, InputError


def failed_row(path: str, exc: BaseException) -> dict[str, Any]:
    """The error row of a file whose worker failed."""
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


def serial_rows(files: Sequence[str], settings: TaskSettings) -> Iterator[dict[str, Any]]:
    """Rows of the files run one after the other in this process."""
    for p in files:
        yield run_task(p, settings)


def pool_rows(files: Sequence[str], settings: TaskSettings, workers: int,
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
    ctx = mp.get_context(method)
    if method == "forkserver":
        # Import the workers' code once, in the server: a worker forked from it then starts
        # without importing matplotlib & co., so a Ctrl-C to the process group cannot land
        # in that import before the worker ignores it (the server printed an ImportError
        # traceback over the one-line message).
        ctx.set_forkserver_preload([__name__])
    queue = deque(files)
    suspects: deque[str] = deque()  # in flight when a pool broke: re-run one at a time
    while queue or suspects:
        with ProcessPoolExecutor(max_workers=workers, mp_context=ctx,
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
                                yield failed_row(path, e)
                            else:
                                suspects.append(path)
                            continue
                        except Exception as e:  # noqa: BLE001
                            row = failed_row(path, e)
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


def dask_rows(files: Sequence[str], settings: TaskSettings, address: Any,
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
                    row = failed_row(path, e)
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
