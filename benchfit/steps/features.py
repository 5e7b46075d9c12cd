"""Low-level trace features shared by the step and load-step measurements.

Getting samples out of a trace (with clear errors for NaN), robust noise,
noise-matched smoothing, clipped-sample runs, level crossings with linear
interpolation, and ringing (frequency and log decrement) from lobes found with
hysteresis.  Every function is vectorised over the samples.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import signal

from benchfit.data.trace import TimeTrace
from benchfit.errors import InputError

#: Normal-consistency factor of the median absolute deviation.
MAD_TO_SIGMA = 1.4826
#: Fewest samples a trace must have to be measured.
MIN_SAMPLES = 20


def trace_arrays(data, channel: str | int | None = None) -> tuple[np.ndarray, np.ndarray, str, str | None]:
    """(time_s, samples, channel name, source file) from a TimeTrace or a (t, y) pair.

    Raises
    ------
    InputError
        NaN or infinite samples (naming the first one and how many), too few samples.
    """
    if isinstance(data, TimeTrace):
        y = data.channel(channel)
        names = data.names
        if channel is None:
            name = names[0]
        elif isinstance(channel, int) or str(channel).isdigit():
            name = names[int(channel)]
        else:
            name = next(n for n in names if n.lower() == str(channel).lower())
        t = data.time_s
        source = data.provenance.sources[0] if data.provenance.sources else None
    else:
        try:
            t, y = data
        except (TypeError, ValueError):
            raise InputError("expected a TimeTrace or a (time_s, samples) pair") from None
        trace = TimeTrace(time_s=t, channels={"y": y})  # validates the time axis
        t, y, name, source = trace.time_s, trace.channels["y"], "y", None
    bad = ~np.isfinite(y)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise InputError(
            f"channel {name!r} has {int(bad.sum())} missing or non-numeric samples (NaN/inf), first at "
            f"sample {i + 1} (t = {t[i]:.6g} s); expected numbers throughout (re-export the record "
            f"or cut it before that sample)", source=source)
    if y.shape[0] < MIN_SAMPLES:
        raise InputError(f"channel {name!r} has {y.shape[0]} samples; expected at least {MIN_SAMPLES}",
                         source=source)
    return np.asarray(t, float), np.asarray(y, float), name, source


def robust_sigma(x: np.ndarray) -> float:
    """Standard deviation of Gaussian noise from the median absolute deviation."""
    x = np.asarray(x, float)
    if x.size == 0:
        return float("nan")
    return float(MAD_TO_SIGMA * np.median(np.abs(x - np.median(x))))


def difference_sigma(y: np.ndarray) -> float:
    """Noise from sample-to-sample differences (robust; a smooth signal barely adds to it)."""
    return robust_sigma(np.diff(np.asarray(y, float))) / math.sqrt(2.0)


@dataclass(frozen=True)
class Smoother:
    """A Savitzky-Golay smoother sized so the smoothed noise is a small fraction of a step.

    ``width`` 1 means no smoothing; ``gain`` is the noise standard deviation after
    smoothing divided by the one before.
    """

    width: int
    order: int
    gain: float

    def __call__(self, y: np.ndarray) -> np.ndarray:
        if self.width <= 1:
            return np.asarray(y, float).copy()
        return signal.savgol_filter(y, self.width, self.order, mode="interp")


def make_smoother(relative_noise: float, n: int, target: float = 2e-3,
                  max_width: int | None = None) -> Smoother:
    """Smallest odd Savitzky-Golay window bringing ``relative_noise`` down to ``target``.

    The window never exceeds 1 % of the record nor ``max_width`` (half the edge
    it is meant to locate: a wider window rings on a sharp edge and invents
    overshoot); cubic polynomials keep the bias on curved parts small.
    """
    if not np.isfinite(relative_noise) or relative_noise <= target:
        return Smoother(1, 0, 1.0)
    cap = max(1, n // 100 if max_width is None else min(n // 100, max_width))
    want = int(math.ceil(2.25 * (relative_noise / target) ** 2))  # cubic SG: var gain ≈ 2.25/w
    w = min(want, cap)
    w = w if w % 2 else w - 1
    if w < 5:
        return Smoother(1, 0, 1.0)
    order = 3
    gain = float(np.sqrt(np.sum(signal.savgol_coeffs(w, order) ** 2)))
    return Smoother(w, order, gain)


def clipped_runs(y: np.ndarray, *, min_run: int = 3, ignore_levels: tuple[float, ...] = ()
                 ) -> tuple[np.ndarray, list[float]]:
    """Samples in runs of ≥ ``min_run`` identical values at the record's maximum or minimum.

    A scope that clips writes its top (or bottom) code again and again; noise
    makes such runs implausible otherwise.  Levels in ``ignore_levels`` (the
    flat parts of a noise-free record) are not reported.

    Returns
    -------
    mask, levels
        Boolean mask of the clipped samples, and the values they sit at.
    """
    y = np.asarray(y, float)
    mask = np.zeros(y.shape, bool)
    levels: list[float] = []
    for level in {float(y.max()), float(y.min())}:
        if any(level == v for v in ignore_levels):
            continue
        at = y == level
        edges = np.diff(np.concatenate([[0], at.view(np.int8), [0]]))
        starts, ends = np.flatnonzero(edges == 1), np.flatnonzero(edges == -1)
        runs = [(s, e) for s, e in zip(starts, ends, strict=True) if e - s >= min_run]
        for s, e in runs:
            mask[s:e] = True
        if runs:
            levels.append(level)
    return mask, sorted(levels)


def first_crossing(t: np.ndarray, u: np.ndarray, level: float, start: int = 0) -> float:
    """First time at or after index ``start`` where ``u`` reaches ``level`` (interpolated).

    NaN when it never does.
    """
    idx = np.flatnonzero(u[start:] >= level)
    if idx.size == 0:
        return float("nan")
    i = start + int(idx[0])
    if i == 0 or u[i] == level or i == start:
        return float(t[i])
    return float(np.interp(level, [u[i - 1], u[i]], [t[i - 1], t[i]]))


def last_exit(t: np.ndarray, dev: np.ndarray, limit: float, start: int = 0) -> tuple[float, bool]:
    """Time after which ``|dev|`` stays within ``limit`` (interpolated), from index ``start``.

    Returns ``(time, settled)``; ``settled`` is False when the last sample is
    still outside (the time is then the record's end).
    """
    out = np.flatnonzero(np.abs(dev[start:]) > limit)
    if out.size == 0:
        return float(t[start]), True
    i = start + int(out[-1])
    if i >= len(t) - 1:
        return float(t[-1]), False
    a, b = abs(dev[i]), abs(dev[i + 1])
    frac = (a - limit) / (a - b) if a != b else 0.0
    return float(t[i] + frac * (t[i + 1] - t[i])), True


@dataclass(frozen=True)
class Ringing:
    """Ringing about a level: crossing times, lobe peaks and what follows from them.

    ``freq_hz`` needs three crossings (a swing past the level and back),
    ``log_decrement`` (per full period) two lobes; either is NaN otherwise.
    """

    crossings_s: tuple[float, ...]
    lobe_peaks: tuple[float, ...]
    lobe_times_s: tuple[float, ...]
    freq_hz: float
    log_decrement: float


def ringing(t: np.ndarray, dev: np.ndarray, hysteresis: float) -> Ringing:
    """Find lobes of ``dev`` (signal minus its final level) with a Schmitt trigger.

    A lobe is a stretch between two zero crossings whose peak exceeds
    ``hysteresis``; the crossings are located by linear interpolation at the last
    sign change before the signal passes the opposite threshold.  The ringing
    frequency comes from a straight-line fit of crossing time against crossing
    number (half a period apart), the log decrement from a straight-line fit of
    ln|peak| against lobe number (doubled: per full period).
    """
    dev = np.asarray(dev, float)
    decisive = np.where(dev > hysteresis, 1, np.where(dev < -hysteresis, -1, 0))
    idx = np.flatnonzero(decisive)
    if idx.size == 0:
        return Ringing((), (), (), float("nan"), float("nan"))
    states = decisive[idx]
    change = np.flatnonzero(np.diff(states) != 0) + 1  # positions in idx where the state flips
    crossings: list[float] = []
    bounds: list[int] = []
    for c in change:
        lo, hi = int(idx[c - 1]), int(idx[c])
        seg = dev[lo:hi + 1]
        sgn = np.flatnonzero(np.signbit(seg[:-1]) != np.signbit(seg[1:]))
        k = lo + int(sgn[-1]) if sgn.size else lo
        a, b = dev[k], dev[k + 1]
        frac = a / (a - b) if a != b else 0.0
        crossings.append(float(t[k] + frac * (t[k + 1] - t[k])))
        bounds.append(hi)
    peaks: list[float] = []
    ptimes: list[float] = []
    for a, b in zip(bounds[:-1], bounds[1:], strict=True):  # lobes closed on both sides
        seg = np.abs(dev[a:b])
        j = a + int(np.argmax(seg))
        peaks.append(float(dev[j]))
        ptimes.append(float(t[j]))
    freq = float("nan")
    if len(crossings) >= 3:  # at least one swing past the level and back: ringing, not one overshoot
        # The first crossing is the rise itself; a pure second-order response crosses at
        # equal spacing from it on, higher orders do not, so leave it out when there are enough.
        use = crossings[1:] if len(crossings) >= 4 else crossings
        half = np.polyfit(np.arange(len(use)), use, 1)[0]
        freq = float(1.0 / (2.0 * half)) if half > 0 else float("nan")
    dec = float("nan")
    if len(peaks) >= 2:
        slope = np.polyfit(np.arange(len(peaks)), np.log(np.abs(peaks)), 1)[0]
        dec = float(-2.0 * slope)
    return Ringing(tuple(crossings), tuple(peaks), tuple(ptimes), freq, dec)
