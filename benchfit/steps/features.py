"""Low-level trace features shared by the step and load-step measurements.

Getting samples out of a trace (with clear errors for NaN), robust noise,
noise-matched smoothing, clipped-sample runs and level crossings with linear
interpolation.  Ringing lobes and fitted peaks are in :mod:`benchfit.steps.lobes`.
Every function is vectorised over the samples.
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
#: Half-width of the window (robust σ) whose samples give the noise's standard deviation.
CLIP_SIGMAS = 4.0
#: Variance of a normal distribution truncated at ±CLIP_SIGMAS σ, over the untruncated one:
#: 1 − 2cφ(c)/(2Φ(c) − 1) (truncated-normal moments, any statistics handbook).
_TRUNCATED_VARIANCE = 1.0 - 2.0 * CLIP_SIGMAS * math.exp(-CLIP_SIGMAS ** 2 / 2) / math.sqrt(
    2 * math.pi) / math.erf(CLIP_SIGMAS / math.sqrt(2))


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


def quantum(x: np.ndarray) -> float:
    """The code step of a quantised record (an ADC's LSB as exported), or 0 when not quantised.

    Evidence: the distinct values are few (at most a quarter of the samples)
    and their spacings are whole multiples (within 1 %) of the smallest one
    for at least 90 % of them.
    """
    x = np.asarray(x, float)
    u = np.unique(x[np.isfinite(x)])
    if u.size < 2 or u.size > x.size / 4:
        return 0.0
    d = np.diff(u)
    q = float(d.min())
    if not q > 0:
        return 0.0
    ratio = d / q
    whole = np.abs(ratio - np.rint(ratio)) <= 0.01 * np.maximum(np.rint(ratio), 1.0)
    return q if whole.mean() >= 0.9 else 0.0


def _clipped_variance(x: np.ndarray) -> tuple[float, float]:
    """(variance of the samples within :data:`CLIP_SIGMAS` robust σ of the median, corrected for
    the truncation of a normal distribution there; code step) of ``x``."""
    x = np.asarray(x, float)
    med = float(np.median(x))
    s0 = MAD_TO_SIGMA * float(np.median(np.abs(x - med)))
    q = quantum(x)
    width = CLIP_SIGMAS * max(s0, q)
    if width == 0:
        return 0.0, q
    kept = x[np.abs(x - med) <= width]
    if kept.size < 2:
        return 0.0, q
    return float(np.var(kept, ddof=1)) / _TRUNCATED_VARIANCE, q


def robust_sigma(x: np.ndarray) -> float:
    """Standard deviation of Gaussian noise, robust to outliers and not stepped by quantisation.

    The median absolute deviation of a quantised record can only take a few
    values (whole or half codes), so with 5 mV of noise on 1 mV codes it
    reads 4.4 or 5.9 mV.  Here the MAD only sets a clipping window (±4σ, at
    least ±4 codes around the median); the standard deviation of the samples
    inside it, corrected for the truncation at ±4σ of a normal distribution,
    less Sheppard's correction q²/12 for a code step q (Sheppard 1898; any
    text on grouped data), is the estimate.
    """
    x = np.asarray(x, float)
    if x.size == 0:
        return float("nan")
    var, q = _clipped_variance(x)
    return float(math.sqrt(max(var - q * q / 12.0, 0.0)))


def difference_sigma(y: np.ndarray) -> float:
    """Noise from sample-to-sample differences (robust; a smooth signal barely adds to it).

    A difference carries the quantisation error of two samples: σ² = var(Δ)/2 − q²/12.
    """
    d = np.diff(np.asarray(y, float))
    if d.size == 0:
        return float("nan")
    var, _ = _clipped_variance(d)
    q = quantum(np.asarray(y, float))
    return float(math.sqrt(max(var / 2.0 - q * q / 12.0, 0.0)))


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
