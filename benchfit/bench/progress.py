"""A one-line progress bar on stderr: points done, rate, time left."""

from __future__ import annotations

import sys
import time
from collections.abc import Callable
from typing import TextIO


def format_progress(done: int, total: int, elapsed_s: float, *, width: int = 24,
                    already: int = 0) -> str:
    """The text of the bar, e.g. ``[#####-----] 50/100 points  12.5 pt/s  0:04 left``.

    Parameters
    ----------
    done, total
        Points saved so far and points in the whole capture.
    elapsed_s
        Time since this run started, in s.
    already
        Points that were on disk before this run (a resume); they do not count
        towards the rate.
    """
    total = max(int(total), 1)
    frac = min(max(done / total, 0.0), 1.0)
    filled = int(round(frac * width))
    bar = "#" * filled + "-" * (width - filled)
    measured = done - already
    if measured > 0 and elapsed_s > 0:
        rate = measured / elapsed_s
        left = (total - done) / rate
        m, s = divmod(int(round(left)), 60)
        h, m = divmod(m, 60)
        eta = f"{h}:{m:02d}:{s:02d}" if h else f"{m}:{s:02d}"
        tail = f"{rate:.3g} pt/s  {eta} left"
    else:
        tail = "-- pt/s  --:-- left"
    return f"[{bar}] {done}/{total} points  {tail}"


class ProgressBar:
    """Redraws :func:`format_progress` in place on a terminal; silent elsewhere.

    Parameters
    ----------
    total
        Points in the whole capture.
    stream
        Where to draw (stderr by default).
    force
        Draw even when ``stream`` is not a terminal (one line per update).
    """

    def __init__(self, total: int, *, stream: TextIO | None = None, force: bool = False,
                 clock: Callable[[], float] = time.monotonic) -> None:
        self.total = total
        self.stream = stream or sys.stderr
        self.clock = clock
        self.t0 = clock()
        self.already: int | None = None
        self.enabled = force or bool(getattr(self.stream, "isatty", lambda: False)())
        self.tty = bool(getattr(self.stream, "isatty", lambda: False)())
        self.last = ""

    def __call__(self, done: int, total: int | None = None) -> None:
        if total is not None:
            self.total = total
        if self.already is None:
            self.already = done
            self.t0 = self.clock()
        self.last = format_progress(done, self.total, self.clock() - self.t0, already=self.already)
        if self.enabled:
            end = "\r" if self.tty else "\n"
            self.stream.write(self.last + end)
            self.stream.flush()

    def close(self) -> None:
        if self.enabled and self.tty and self.last:
            self.stream.write("\n")
            self.stream.flush()
