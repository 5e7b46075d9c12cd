"""Timing helper shared by the benchmark scripts (imported as ``_timing``: the scripts run
from this folder, which Python puts first on the path)."""

from __future__ import annotations

import time
from collections.abc import Callable


def best_wall(fn: Callable[[], object], repeat: int = 5) -> float:
    """Shortest wall time of ``repeat`` calls of ``fn``, in seconds (the least disturbed by a
    shared machine's other work)."""
    best = float("inf")
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t0)
    return best
