"""A one-line progress display on stderr: files done, failures, errors, time left."""

from __future__ import annotations

import sys
import time
from typing import TextIO


def _clock(seconds: float) -> str:
    seconds = max(0, int(round(seconds)))
    h, rem = divmod(seconds, 3600)
    m, s = divmod(rem, 60)
    return f"{h}:{m:02d}:{s:02d}" if h else f"{m}:{s:02d}"


class Progress:
    """Counts finished rows and redraws a status line.

    On a terminal the line is redrawn in place (at most 10 times a second);
    into a file or pipe a line is written every ``every_s`` seconds and at the end,
    so logs of long lots stay short.

    Parameters
    ----------
    total
        Files to run in this session (resumed files excluded).
    stream
        Where to draw; stderr by default.  None draws nothing.
    every_s
        Seconds between lines when ``stream`` is not a terminal.
    """

    def __init__(self, total: int, stream: TextIO | None = sys.stderr, every_s: float = 10.0,
                 clock=time.monotonic) -> None:
        self.total = int(total)
        self.done = 0
        self.failed = 0
        self.errors = 0
        self.stream = stream
        self._clock = clock
        self._start = clock()
        self._last = -1e9
        self._tty = bool(stream is not None and getattr(stream, "isatty", lambda: False)())
        self._every = 0.1 if self._tty else float(every_s)

    @property
    def elapsed_s(self) -> float:
        return self._clock() - self._start

    def left_s(self) -> float | None:
        """Estimated seconds left (None before the first row)."""
        if self.done == 0:
            return None
        return self.elapsed_s / self.done * (self.total - self.done)

    def line(self) -> str:
        pct = 100.0 * self.done / self.total if self.total else 100.0
        left = self.left_s()
        left_txt = "--:--" if left is None else _clock(left)
        return (f"batch: {self.done}/{self.total} ({pct:.0f}%), {self.failed} failed, "
                f"{self.errors} errors, {_clock(self.elapsed_s)} elapsed, {left_txt} left")

    def update(self, status: str) -> None:
        """Count one finished row of the given status and redraw when due."""
        self.done += 1
        self.failed += status == "fail"
        self.errors += status == "error"
        now = self._clock()
        if now - self._last >= self._every or self.done == self.total:
            self._last = now
            self._draw()

    def _draw(self) -> None:
        if self.stream is None:
            return
        if self._tty:
            self.stream.write("\r" + self.line() + "\x1b[K")
        else:
            self.stream.write(self.line() + "\n")
        self.stream.flush()

    def close(self) -> None:
        """Finish the line (a newline on a terminal)."""
        if self.stream is not None and self._tty:
            self._draw()
            self.stream.write("\n")
            self.stream.flush()
