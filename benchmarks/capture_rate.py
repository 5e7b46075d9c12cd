"""Capture overhead: points per second against the simulated analyzer (zero measurement time).

What is measured is benchfit's own cost per point and per segment (commands, error-queue
checks, reads, fsync'd appends and manifest replacement) through the two real VISA code
paths: the pyvisa-sim backend and pyvisa-py over a 127.0.0.1 socket.  A real instrument adds
its own settling and measurement time on top.

    .venv/bin/python benchmarks/capture_rate.py
    .venv/bin/python benchmarks/capture_rate.py --points 801 --repeat 5

Prints figures only; nothing is asserted.
"""

from __future__ import annotations

import argparse
import dataclasses
import tempfile
import time
from pathlib import Path

import numpy as np

from benchfit.bench.capture import CaptureSettings, run_capture
from benchfit.bench.profile import find_profile
from benchfit.bench.sim_transport import simulated_session
from benchfit.bench.simulator import SimulatedAnalyzer


def plant(f):
    return 10.0 / (1.0 + 1j * np.asarray(f) / 1e3)


def one(transport: str, encoding: str, mode: str, segment: int, points: int, folder: Path) -> float:
    prof = dataclasses.replace(find_profile("generic-analyzer"), encoding=encoding, timeout_s=5.0)
    settings = CaptureSettings(10, 1e5, points, mode=mode, segment_points=segment)
    out = Path(tempfile.mkdtemp(dir=folder)) / "c.csv"
    inst = SimulatedAnalyzer(plant, noise=1e-3, time_per_point_s=0.0)
    with simulated_session(inst, prof, transport=transport) as s:
        t0 = time.perf_counter()
        run_capture(s, settings, out)
        return time.perf_counter() - t0


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--points", type=int, default=401)
    ap.add_argument("--step-points", type=int, default=101)
    ap.add_argument("--repeat", type=int, default=3)
    args = ap.parse_args()
    cases = []
    for transport in ("sim", "tcp"):
        for enc in ("ascii", "real64"):
            cases.append((transport, enc, "sweep", 0, args.points))
        cases.append((transport, "real64", "sweep", 50, args.points))
        cases.append((transport, "real64", "step", 0, args.step_points))
    print(f"{'transport':<9} {'encoding':<8} {'mode':<6} {'segment':>7} {'points':>6} "
          f"{'best s':>8} {'points/s':>9}")
    with tempfile.TemporaryDirectory() as tmp:
        for transport, enc, mode, seg, n in cases:
            best = min(one(transport, enc, mode, seg, n, Path(tmp)) for _ in range(args.repeat))
            print(f"{transport:<9} {enc:<8} {mode:<6} {seg:>7} {n:>6} {best:>8.3f} {n / best:>9.0f}")


if __name__ == "__main__":
    main()
