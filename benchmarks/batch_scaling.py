"""Scaling of `benchfit batch`: time per sweep with 1 and 2 workers, memory as the lot grows,
and a lot-size-vs-time planning table.

Generates a lot of converter-like units (401-point plant sweeps with part-to-part
spread, fixed seeds) in a temporary folder, then runs the whole lot (fit, loop
with the lot's design, margins, judging) serially and in a process pool.  Memory
is sampled as rows finish in the serial run: the peak resident size after 250,
500 and 1000 sweeps should stay flat, because sweeps are read inside the task
and dropped with it.

    python benchmarks/batch_scaling.py                  # 1000 sweeps, 1 and 2 workers
    python benchmarks/batch_scaling.py --sweeps 200 --workers 1,2,4 --quantity loop

Prints figures only; nothing is asserted (timings are not tests).
"""

from __future__ import annotations

import os

for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")  # one BLAS thread per worker: workers are the parallelism

import argparse  # noqa: E402
import resource  # noqa: E402
import tempfile  # noqa: E402
import time  # noqa: E402
from pathlib import Path  # noqa: E402

from benchfit.batch.limits import parse_limits  # noqa: E402
from benchfit.batch.runner import find_sweeps, run_lot  # noqa: E402
from benchfit.batch.synth_lot import lot_design, make_lot  # noqa: E402
from benchfit.batch.table import read_table  # noqa: E402
from benchfit.batch.task import TaskSettings, design_loop_from_dict  # noqa: E402

# Common practice, no source: 45 deg / 6 dB minimum margins for a converter loop.
LIMITS = "[margins]\nmin_phase_margin_deg = 45\nmin_gain_margin_db = 6\ncrossover_hz = [15e3, 40e3]\n"


def _rss_mib() -> float:
    """Current resident set size of this process, MiB (Linux /proc)."""
    with open("/proc/self/statm") as fh:
        pages = int(fh.read().split()[1])
    return pages * os.sysconf("SC_PAGE_SIZE") / 2**20


def _peak_mib() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0  # Linux reports KiB


def _descendants() -> list[int]:
    """Processes descending from this one (pool workers and the fork server)."""
    parent = {}
    for d in os.listdir("/proc"):
        if d.isdigit():
            try:
                with open(f"/proc/{d}/stat") as fh:
                    parent[int(d)] = int(fh.read().rsplit(")", 1)[1].split()[1])
            except OSError:
                continue
    me, mine = os.getpid(), []
    for pid in parent:
        p, hops = pid, 0
        while p in parent and p != me and hops < 64:
            p, hops = parent[p], hops + 1
        if p == me and pid != me:
            mine.append(pid)
    return mine


def _workers_mib() -> tuple[float, float]:
    """(resident, peak) MiB of the largest descendant process (a pool worker)."""
    best = (0.0, 0.0)
    for pid in _descendants():
        try:
            with open(f"/proc/{pid}/status") as fh:
                kv = dict(line.split(":", 1) for line in fh if ":" in line)
            rss = int(kv["VmRSS"].split()[0]) / 1024.0
            hwm = int(kv["VmHWM"].split()[0]) / 1024.0
        except (OSError, KeyError, ValueError):
            continue
        best = max(best, (rss, hwm), key=lambda t: t[1])
    return best


def _cpu_s() -> float:
    """CPU seconds (user + system) of this process and its live descendants."""
    total = time.process_time()
    tick = os.sysconf("SC_CLK_TCK")
    for pid in _descendants():
        try:
            with open(f"/proc/{pid}/stat") as fh:
                fields = fh.read().rsplit(")", 1)[1].split()
            total += (int(fields[11]) + int(fields[12])) / tick  # utime, stime
        except (OSError, ValueError, IndexError):
            continue
    return total


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sweeps", type=int, default=1000)
    ap.add_argument("--workers", default="1,2", help="comma-separated worker counts")
    ap.add_argument("--quantity", choices=("plant", "loop"), default="plant",
                    help="plant: fit + design loop + margins (default); loop: margins from data")
    ap.add_argument("--points", type=int, default=401)
    args = ap.parse_args()
    counts = [int(w) for w in args.workers.split(",")]
    checkpoints = sorted({c for c in (args.sweeps // 4, args.sweeps // 2, args.sweeps) if c > 0})

    with tempfile.TemporaryDirectory(prefix="benchfit-lot-") as tmp:
        tmp = Path(tmp)
        t0 = time.perf_counter()
        make_lot(tmp / "lot", args.sweeps, quantity=args.quantity, seed=7, points=args.points)
        gen_s = time.perf_counter() - t0
        files = find_sweeps(tmp / "lot")
        settings = TaskSettings(
            design=design_loop_from_dict(lot_design()) if args.quantity == "plant" else None,
            limits=parse_limits(LIMITS))
        print(f"lot: {len(files)} {args.quantity} sweeps of {args.points} points, "
              f"generated in {gen_s:.1f} s; {os.cpu_count()} cores; BLAS threads "
              f"{os.environ['OPENBLAS_NUM_THREADS']}")

        results, first_row, mem_rows, cpu = {}, {}, {}, {}
        for w in counts:
            seen, t_start, cpu0 = [0], time.perf_counter(), time.process_time()

            def probe(_row, w=w, seen=seen, t_start=t_start, cpu0=cpu0):
                seen[0] += 1
                if seen[0] == 1:
                    first_row[w] = time.perf_counter() - t_start
                if seen[0] == len(files):  # workers are still alive: read their CPU time
                    cpu[w] = _cpu_s() - cpu0
                if seen[0] in checkpoints:
                    mem_rows.setdefault(w, []).append((seen[0], _rss_mib(), _peak_mib(), *_workers_mib()))

            out = tmp / f"results_{w}.csv"
            info = run_lot(files, settings, out, workers=w, progress=None, on_row=probe)
            rows = read_table(out)[1]
            assert len(rows) == len(files)
            errors = sorted({r["error"] for r in rows if r["status"] == "error"})
            for e in errors[:3]:
                print(f"  error row ({w} workers): {e}")
            results[w] = info
            steady = (info.seconds - first_row[w]) / max(1, info.ran - 1)
            print(f"workers {w} ({info.executor}): total {info.seconds:7.1f} s, "
                  f"{1e3 * info.seconds_per_sweep:7.1f} ms per sweep overall, "
                  f"{1e3 * steady:7.1f} ms after the first row (start-up {first_row[w]:.2f} s), "
                  f"CPU {1e3 * cpu[w] / info.ran:7.1f} ms per sweep; load average "
                  f"{os.getloadavg()[0]:.1f}; status {dict(sorted(info.counts.items()))}")

        base = results[counts[0]]
        one = base.seconds * counts[0]  # serial-equivalent seconds
        print("\nscaling (speed-up against the first run, efficiency = speed-up / workers;")
        print(" CPU per sweep staying level means no parallel overhead, whatever else loads the cores):")
        for w, info in results.items():
            speed = one / info.seconds
            print(f"  {w:3d} workers: speed-up {speed:5.2f}, efficiency {speed / w:5.2f}, "
                  f"CPU per sweep x{cpu[w] / cpu[counts[0]]:.2f} of the first run")

        print("\nmemory as the lot grows (MiB; workers: the largest worker process):")
        for w, samples in mem_rows.items():
            for n, rss, peak, wrss, wpeak in samples:
                work = f", worker resident {wrss:6.1f} peak {wpeak:6.1f}" if wpeak else ""
                print(f"  {w} workers, after {n:6d} sweeps: main resident {rss:6.1f} "
                      f"peak {peak:6.1f}{work}")
            first, last = samples[0], samples[-1]
            growth = max(last[2] - first[2], last[4] - first[4])
            print(f"  {w} workers: peak growth from {first[0]} to {last[0]} sweeps {growth:+.1f} MiB")

        # Planning: the CPU cost of one sweep on a dedicated core (CPU time of the first run,
        # which other load on this machine does not inflate as it does wall time), scaled by
        # the CPU-time ratio of the largest worker count (the parallel overhead).  Assumes the
        # cluster's cores are like this machine's; Dask adds roughly a millisecond of
        # scheduling per task, a figure from memory of its documentation, negligible here.
        per = cpu[counts[0]] / len(files)
        wmax = counts[-1]
        eff = min(1.0, cpu[counts[0]] / cpu[wmax]) if wmax > 1 else 1.0
        sizes = (1_000, 10_000, 100_000)
        cores = (1, 2, 8, 32, 128)
        print(f"\nplanning estimate: {1e3 * per:.0f} ms CPU per sweep per dedicated core, "
              f"parallel efficiency {eff:.2f} (CPU-time ratio at {wmax} workers)")
        print("  lot size " + "".join(f"{c:>10d} cores" for c in cores))
        for n in sizes:
            cells = []
            for c in cores:
                s = n * per / (c * (eff if c > 1 else 1.0))
                cells.append(f"{s / 3600:9.2f} h" if s >= 3600 else f"{s / 60:9.1f} m")
            print(f"  {n:8d} " + "".join(f"{x:>16s}" for x in cells))


if __name__ == "__main__":
    main()
