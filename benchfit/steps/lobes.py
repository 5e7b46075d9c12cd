"""Ringing lobes and their peaks, shared by the step and load-step measurements.

The lobes of a deviation about its final level are found with hysteresis (a Schmitt
trigger); the ringing frequency and log decrement come from straight-line fits over the
lobes that stand clear of the noise (:func:`lobes_kept`), and a lobe's peak from
polynomials fitted to its raw samples (:func:`fitted_peak`), which is not biased high
by the noise the way the largest sample is.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


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


#: A lobe counts for the ringing figures only while its peak stands this many noise σ above
#: the final level (the noise-floor lobes' crossings and peaks are mostly noise).  Common
#: practice, no source.
LOBE_SNR = 10.0


def lobes_kept(peaks: list[float], noise: float) -> int:
    """How many lobes, from the first, the ringing figures use: up to the first lobe whose
    |peak| falls below :data:`LOBE_SNR` × ``noise`` (every lobe when ``noise`` is 0).

    A crossing's time error is about σ/|slope| and a lobe peak's log error σ/|peak|, so the
    last lobes near the noise floor carry little information and a biased one (their peaks
    are maxima of noisy samples); stopping there keeps them out of the straight-line fits.
    """
    if not noise > 0:
        return len(peaks)
    for k, p in enumerate(peaks):
        if abs(p) < LOBE_SNR * noise:
            return k
    return len(peaks)


def ringing(t: np.ndarray, dev: np.ndarray, hysteresis: float, noise: float = 0.0,
            raw: np.ndarray | None = None) -> Ringing:
    """Find lobes of ``dev`` (signal minus its final level) with a Schmitt trigger.

    A lobe is a stretch between two zero crossings whose peak exceeds
    ``hysteresis``; the crossings are located by linear interpolation at the last
    sign change before the signal passes the opposite threshold.  The ringing
    frequency comes from a straight-line fit of crossing time against crossing
    number (half a period apart), the log decrement from a straight-line fit of
    ln|peak| against lobe number (doubled: per full period).  Only the lobes
    :func:`lobes_kept` keeps (peaks above :data:`LOBE_SNR` × ``noise``) and the
    crossings around them enter the fits, each crossing weighted by the amplitude of
    the lobes beside it and each ln|peak| by |peak| (their errors scale as 1/amplitude).
    With ``raw`` (the unsmoothed deviation) a lobe's peak is :func:`fitted_peak` of it
    (polynomials on the raw samples), not the largest sample.
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
        sign = 1.0 if dev[j] > 0 else -1.0
        if raw is not None and b - a >= PEAK_MIN_SAMPLES:
            pk = fitted_peak(t[a:b], sign * np.asarray(raw[a:b], float), sign * dev[a:b])
            peaks.append(sign * pk.value)
            ptimes.append(pk.time_s)
        else:
            peaks.append(float(dev[j]))
            ptimes.append(float(t[j]))
    keep = lobes_kept(peaks, noise)
    # crossing k closes lobe k-1 and opens lobe k (lobe k lies between crossings k and k+1)
    crossings_used = crossings[: keep + 1] if noise > 0 else crossings
    amp = np.array([max(abs(peaks[k - 1]) if 0 < k <= len(peaks) else 0.0,
                        abs(peaks[k]) if k < len(peaks) else 0.0) for k in range(len(crossings_used))])
    freq = float("nan")
    if len(crossings_used) >= 3:  # at least one swing past the level and back: ringing, not one overshoot
        # The first crossing is the rise itself; a pure second-order response crosses at
        # equal spacing from it on, higher orders do not, so leave it out when there are enough.
        first = 1 if len(crossings_used) >= 4 else 0
        use, w = np.asarray(crossings_used[first:]), amp[first:]
        w = w if np.all(w > 0) else None
        half = np.polyfit(np.arange(len(use)), use, 1, w=w)[0]
        freq = float(1.0 / (2.0 * half)) if half > 0 else float("nan")
    dec = float("nan")
    kp = np.asarray(peaks[:keep])
    if kp.size >= 2:
        slope = np.polyfit(np.arange(kp.size), np.log(np.abs(kp)), 1, w=np.abs(kp))[0]
        dec = float(-2.0 * slope)
    return Ringing(tuple(crossings), tuple(peaks), tuple(ptimes), freq, dec)


#: the fitted peak's second pass uses the part of the first fit above this fraction of its height
PEAK_WINDOW_FRACTION = 0.55
#: fewest samples in a lobe for a fitted peak (else the smoothed maximum)
PEAK_MIN_SAMPLES = 9
#: degree of the polynomials fitted to the whole lobe and to its top (4: unbiased within the
#: scatter on 2-10 mV of noise on a 1 V, 1.5 % overshoot, and within 0.01 % of the step on a
#: clean ζ = 0.3 lobe; tests/test_step_bias.py)
PEAK_DEGREE = 4


@dataclass(frozen=True)
class Peak:
    """The peak of a lobe: its index (nearest sample), time, value and how it was found."""

    index: int
    time_s: float
    value: float
    method: str


def _poly_peak(t: np.ndarray, y: np.ndarray, degree: int) -> tuple[float, float, np.ndarray]:
    """(time, value) of the maximum of a least-squares polynomial of ``degree`` of ``y`` on ``t``,
    and the polynomial at ``t``."""
    mid, half = 0.5 * (t[0] + t[-1]), 0.5 * (t[-1] - t[0])
    coef = np.polynomial.polynomial.polyfit((t - mid) / half, y, degree)
    xs = np.linspace(-1.0, 1.0, 4001)
    vals = np.polynomial.polynomial.polyval(xs, coef)
    k = int(np.argmax(vals))
    return float(mid + half * xs[k]), float(vals[k]), \
        np.polynomial.polynomial.polyval((t - mid) / half, coef)


def fitted_peak(t: np.ndarray, raw: np.ndarray, smooth: np.ndarray, level: float = 0.0) -> Peak:
    """The highest point of a lobe of ``raw`` above ``level``, from polynomials fitted to it.

    The maximum of a noisy (or smoothed-noisy) record is biased high: it is
    the largest of many noisy samples near the top.  Here the maximum of
    ``smooth`` only *locates* the lobe: the run of samples around it where
    ``smooth`` stays above ``level`` (between the crossings of the level on
    either side).  A polynomial of degree :data:`PEAK_DEGREE` is fitted in
    least squares to the *raw* samples of the lobe, and fitted again to the
    part where the first fit is above :data:`PEAK_WINDOW_FRACTION` of its
    height; the peak is the second polynomial's maximum.  Noise averages out
    over the whole lobe instead of pushing the maximum up.  With fewer than
    :data:`PEAK_MIN_SAMPLES` samples in the lobe (a sharp peak on a coarse
    record) the smoothed maximum is returned, and ``method`` says so.
    """
    raw = np.asarray(raw, float)
    smooth = np.asarray(smooth, float)
    j = int(np.argmax(smooth))
    if not smooth[j] > level:
        return Peak(j, float(t[j]), float(smooth[j]), "smoothed maximum")
    above = smooth > level
    left = np.flatnonzero(~above[:j])
    right = np.flatnonzero(~above[j:])
    lo = int(left[-1]) + 1 if left.size else 0
    hi = j + int(right[0]) if right.size else raw.size
    if hi - lo < PEAK_MIN_SAMPLES:
        return Peak(j, float(t[j]), float(smooth[j]), "smoothed maximum")
    tp, vp, curve = _poly_peak(t[lo:hi], raw[lo:hi], PEAK_DEGREE)
    top = np.flatnonzero(curve - level >= PEAK_WINDOW_FRACTION * (vp - level))
    n_used = hi - lo
    if top.size >= PEAK_MIN_SAMPLES and vp > level:
        a, b = lo + int(top[0]), lo + int(top[-1]) + 1
        tp, vp, _ = _poly_peak(t[a:b], raw[a:b], PEAK_DEGREE)
        n_used = b - a
    idx = int(np.clip(np.searchsorted(t, tp), 0, t.size - 1))
    return Peak(idx, tp, vp, f"fitted peak (degree-{PEAK_DEGREE} polynomials on the raw samples "
                             f"of the lobe, {n_used} around the top)")
