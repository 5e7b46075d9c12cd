"""Readings of single points through an instrument session, with their settings and time.

The planner sets the level and the bandwidth with the profile's commands
(only when they change), then reads the point ``repeats`` times with
:func:`benchfit.bench.readings.read_cw_point`, the same CW reading the
step-mode capture makes.  Time comes from
a clock the caller gives: the wall clock on the bench, the simulator's own
(simulated) clock without hardware.
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from benchfit.bench.readings import prepare_instrument, read_cw_point
from benchfit.bench.session import Session
from benchfit.errors import InputError


@dataclass(frozen=True)
class Reading:
    """The readings of one point.

    Attributes
    ----------
    freq_hz
        The frequency the instrument reports (or the one asked for).
    values
        Every reading (complex), in order.
    level_v, bandwidth_hz
        The settings used.
    time_s
        Instrument time the point took (settling and every reading).
    """

    freq_hz: float
    values: np.ndarray
    level_v: float
    bandwidth_hz: float
    time_s: float

    @property
    def repeats(self) -> int:
        return int(self.values.size)

    @property
    def mean(self) -> complex:
        return complex(np.mean(self.values))

    @property
    def scatter(self) -> float:
        """Relative rms scatter of one reading about the mean (nan with one reading)."""
        n = self.values.size
        if n < 2:
            return math.nan
        dev = self.values - np.mean(self.values)
        return float(np.sqrt(np.sum(np.abs(dev) ** 2) / (n - 1)) / max(abs(self.mean), 1e-300))

    @property
    def abs_scatter(self) -> float:
        """Complex rms scatter of one reading about the mean, absolute (nan with one reading)."""
        return self.scatter * abs(self.mean)

    @property
    def sigma(self) -> float:
        """σ of the mean reading (absolute, complex)."""
        return self.abs_scatter / math.sqrt(self.repeats)


class Probe:
    """Point-by-point readings through ``session`` (see module notes).

    Parameters
    ----------
    session
        An open session with an analyzer profile that has ``cw``, ``level``
        and ``bandwidth`` commands.
    clock
        Returns the instrument time in s (``time.monotonic`` on the bench).
    """

    def __init__(self, session: Session, *, clock: Callable[[], float] = time.monotonic) -> None:
        self.session = session
        self.profile = session.profile
        self.clock = clock
        self._level: float | None = None
        self._bandwidth: float | None = None
        if self.profile.kind != "analyzer":
            raise InputError(f"profile {self.profile.name!r} is a {self.profile.kind} profile; "
                             "an adaptive capture needs an analyzer profile", source="--profile")
        for key, opt in (("cw", "--adaptive"), ("level", "--adaptive"), ("bandwidth", "--adaptive")):
            self.profile.require(key, opt)

    def configure(self) -> None:
        """Clear the status, drop stale errors, set the data format and the CW mode."""
        p, ses = self.profile, self.session
        prepare_instrument(ses, p)
        if p.has("step_mode"):
            ses.configure(p.command("step_mode"))

    def read(self, freq_hz: float, level_v: float, bandwidth_hz: float, repeats: int) -> Reading:
        """Measure one point ``repeats`` times at the given settings."""
        p, ses = self.profile, self.session
        t0 = self.clock()
        if self._level != level_v:
            ses.configure(p.command("level", level_v=level_v))
            self._level = level_v
        if self._bandwidth != bandwidth_hz:
            ses.configure(p.command("bandwidth", bandwidth_hz=bandwidth_hz))
            self._bandwidth = bandwidth_hz
        f_read, values = read_cw_point(ses, p, freq_hz, repeats)
        return Reading(freq_hz=f_read, values=np.asarray(values, complex), level_v=float(level_v),
                       bandwidth_hz=float(bandwidth_hz), time_s=float(self.clock() - t0))
