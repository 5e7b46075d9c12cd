"""What one point costs and how noisy it is, learnt from the points already taken.

Two small models, both fitted to the capture's own readings:

* :class:`NoiseMap`: the scatter of one reading (absolute, complex rms, in
  the units of the response) scales as ``q(f) · sqrt(bandwidth) / level``
  (white noise in the analyzer's channels: its rms grows with the square
  root of the bandwidth, and a bigger stimulus lifts the signal above it).
  ``q(f)`` is estimated from every point's repeat readings and smoothed in
  log frequency, so one point's three readings do not decide its weight
  alone.  Absolute rather than relative scatter: where the response sinks
  into the noise the relative scatter of a few readings stays near 1 however
  narrow the bandwidth, while the absolute scatter still measures the noise.
* :class:`TimeModel`: a reading costs ``c0 + c1/f`` to settle (a fixed part
  and a number of stimulus cycles) plus ``1/bandwidth`` per reading to
  integrate; ``c0`` and ``c1`` come from the time each point actually took.

:func:`required_point_sigma` and :func:`choose_point_settings` are the rules
that turn the asked precision into a bandwidth and a number of readings.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

#: Readings per point by default: enough to estimate the scatter (4 real degrees of
#: freedom from 3 complex readings); they also average, so they cost no more noise-wise
#: than one reading at a third of the bandwidth (common practice, no source).
DEFAULT_REPEATS = 3
#: How many readings at one point share the job of fixing a margin (a crossing is
#: pinned by the points either side of it), so each may be this much noisier than the
#: asked margin σ (common practice, no source).
SHARED_POINTS = 4
#: Half-width (decades) of the zone around a crossing where points decide a margin.
ZONE_DECADES = 0.2
#: Smoothing half-width of the noise map (decades).
SMOOTH_DECADES = 0.35


#: A point whose mean reading has a relative σ above this is buried in the noise:
#: its log-magnitude is biased and its phase not even roughly known (0.3 is about
#: 2.6 dB and 17°; common practice, no source).
BURIED_RELATIVE_SIGMA = 0.3


def noise_dominated(sigma_abs: float, magnitude: float) -> bool:
    """True when a point's noise buries it (relative σ above :data:`BURIED_RELATIVE_SIGMA`).

    Evidence weighed: the σ of the point's mean reading against its magnitude.
    Such a point tells the fit (which works on log-magnitude and phase) more
    noise than response, so it is kept in the log but out of the sweep; where
    it might hide a margin it is measured again with more effort.
    """
    if not (math.isfinite(sigma_abs) and magnitude > 0):
        return False
    return sigma_abs / magnitude > BURIED_RELATIVE_SIGMA


def log_scatter_bias(repeats: np.ndarray) -> np.ndarray:
    """What to add to log10 of a scatter from ``n`` complex readings to remove its bias.

    The sample variance of ``n`` complex Gaussian readings is σ²·χ²_k/k with
    k = 2(n − 1) real degrees of freedom, and E[ln χ²_k] = ψ(k/2) + ln 2 (the
    log-chi-square mean, a standard result; from memory), so the mean of the
    log scatter lies 0.5·(ψ(k/2) − ln(k/2)) below ln σ: 13 % low in σ for
    three readings.  Averaging logs of few-reading scatters without this would
    underestimate the noise.
    """
    from scipy.special import digamma

    k = 2.0 * (np.maximum(np.asarray(repeats, float), 2.0) - 1.0)
    return -0.5 * (digamma(k / 2.0) - np.log(k / 2.0)) / np.log(10.0)


def _ln10_db() -> float:
    return 20.0 / math.log(10.0)


@dataclass(frozen=True)
class NoiseMap:
    """Scatter of one reading (absolute): ``q(f) · sqrt(bandwidth_hz) / level_v``.

    Attributes
    ----------
    log_f
        log10 of the frequencies where q was measured (increasing).
    log_q
        Smoothed log10 q at those frequencies.
    """

    log_f: np.ndarray
    log_q: np.ndarray

    @classmethod
    def from_points(cls, freq_hz: Sequence[float], scatter: Sequence[float], level_v: Sequence[float],
                    bandwidth_hz: Sequence[float], repeats: Sequence[int] | None = None) -> NoiseMap | None:
        """Estimate q(f) from per-point absolute scatter (None when nothing usable was measured).

        Each point gives ``q_i = scatter_i · level_i / sqrt(bw_i)``; the map is
        a straight line in log q against log f fitted over ±:data:`SMOOTH_DECADES`
        around each point (logs: the scatter of three readings is skewed, its
        log less so; a line rather than a mean, because q often trends steeply,
        e.g. where |T| falls, and a mean would lag at the ends of the band).
        With ``repeats``, each log is first corrected for its bias
        (:func:`log_scatter_bias`).
        """
        f = np.asarray(freq_hz, float)
        s = np.asarray(scatter, float)
        lv = np.asarray(level_v, float)
        bw = np.asarray(bandwidth_hz, float)
        ok = np.isfinite(s) & (s > 0) & np.isfinite(f) & (f > 0) & (bw > 0) & (lv > 0)
        if not np.any(ok):
            return None
        x = np.log10(f[ok])
        q = np.log10(s[ok] * lv[ok] / np.sqrt(bw[ok]))
        if repeats is not None:
            q = q + log_scatter_bias(np.asarray(repeats, float)[ok])
        order = np.argsort(x)
        x, q = x[order], q[order]
        smooth = np.empty_like(q)
        for i in range(x.size):
            near = np.abs(x - x[i]) <= SMOOTH_DECADES
            if near.sum() >= 3 and np.ptp(x[near]) > 0:
                # local straight line: unbiased where q trends, also at the ends of the band
                slope, icept = np.polyfit(x[near] - x[i], q[near], 1)
                smooth[i] = icept
            else:
                smooth[i] = float(np.mean(q[near]))
        # one value per frequency (repeated frequencies: linearity re-measurements)
        ux, idx = np.unique(x, return_index=True)
        return cls(log_f=ux, log_q=smooth[idx])

    def q(self, freq_hz: np.ndarray | float) -> np.ndarray:
        """q at ``freq_hz`` (held constant beyond the measured ends)."""
        x = np.log10(np.asarray(freq_hz, float))
        return 10.0 ** np.interp(x, self.log_f, self.log_q)

    def scatter(self, freq_hz, level_v: float, bandwidth_hz) -> np.ndarray:
        """Predicted (absolute) scatter of one reading."""
        return self.q(freq_hz) * np.sqrt(np.asarray(bandwidth_hz, float)) / float(level_v)


@dataclass(frozen=True)
class TimeModel:
    """Time of one point: ``c0 + c1/f`` settling plus ``repeats/bandwidth`` integrating (s)."""

    c0: float = 0.0
    c1: float = 0.0

    @classmethod
    def from_points(cls, freq_hz, time_s, repeats, bandwidth_hz) -> TimeModel:
        """Least-squares c0, c1 >= 0 from the time each point took, less its integration."""
        f = np.asarray(freq_hz, float)
        t = np.asarray(time_s, float) - np.asarray(repeats, float) / np.asarray(bandwidth_hz, float)
        ok = np.isfinite(t) & (f > 0)
        if ok.sum() < 2:
            return cls(max(float(np.mean(t[ok])) if ok.any() else 0.0, 0.0), 0.0)
        a = np.column_stack([np.ones(ok.sum()), 1.0 / f[ok]])
        c, *_ = np.linalg.lstsq(a, t[ok], rcond=None)
        return cls(max(float(c[0]), 0.0), max(float(c[1]), 0.0))

    def point_time(self, freq_hz, bandwidth_hz, repeats) -> np.ndarray:
        """Predicted time (s) of a point."""
        f = np.asarray(freq_hz, float)
        return self.c0 + self.c1 / f + np.asarray(repeats, float) / np.asarray(bandwidth_hz, float)


def component_sigma(kind: str, pm_sigma_deg: float, gm_sigma_db: float) -> float:
    """The σ (rad or nepers) of phase and log-magnitude that decides a margin near a
    frequency of ``kind``: ``"gain"`` (a gain crossing: the phase margin, in rad) or
    ``"phase"`` (a phase crossing, a resonance above crossover, a buried stretch:
    the gain margin, in nepers)."""
    if kind == "gain":
        return math.radians(pm_sigma_deg)
    return gm_sigma_db / _ln10_db()


def required_point_sigma(freq_hz: float, decisive: Sequence[tuple[float, float]]) -> float:
    """Relative complex σ a point at ``freq_hz`` must reach (σ of its mean reading / |T|).

    Evidence weighed: where the point lies.  ``decisive`` lists (frequency,
    component σ) of what decides a margin: at a gain crossing the phase margin
    follows the phase one to one (component σ: the asked PM σ in rad), at a
    phase crossing the gain margin follows the log magnitude (the asked GM σ in
    nepers; see :func:`component_sigma`).  Within ±:data:`ZONE_DECADES` of such a
    frequency, about :data:`SHARED_POINTS` points share the job, so each may
    have ``sqrt(SHARED_POINTS)`` times that σ in each component; a complex
    relative σ of ``r`` puts ``r/√2`` into each.  The tightest zone the point
    lies in wins.  Elsewhere points only hold the model's shape: no
    requirement (inf), they are taken at the widest bandwidth and weighted by
    the noise they have.
    """
    x = math.log10(freq_hz)
    comps = [c for f, c in decisive
             if f > 0 and math.isfinite(f) and abs(x - math.log10(f)) <= ZONE_DECADES]
    if not comps:
        return math.inf
    return math.sqrt(2.0) * min(comps) * math.sqrt(SHARED_POINTS)


@dataclass(frozen=True)
class PointSettings:
    """How to measure one point: bandwidth (Hz) and number of readings."""

    bandwidth_hz: float
    repeats: int


def widest_bandwidth(freq_hz: float, bandwidth_max_hz: float) -> float:
    """The widest bandwidth usable at ``freq_hz``: the user's limit, and at most the
    frequency itself (an analyzer's filter must integrate at least a whole cycle)."""
    return min(float(bandwidth_max_hz), float(freq_hz))


def choose_point_settings(freq_hz: float, sigma_required: float, level_v: float,
                          noise: NoiseMap | None, bandwidth_max_hz: float, bandwidth_min_hz: float,
                          max_repeats: int, repeats: int = DEFAULT_REPEATS) -> PointSettings:
    """Bandwidth and readings for a point: as wide and as few as the asked σ allows.

    Evidence weighed: the noise map's predicted scatter at this frequency
    (``sigma_required`` is absolute too: the relative σ times |T|).
    With ``n`` readings the point's σ is ``scatter/sqrt(n)`` and scatter grows
    as sqrt(bandwidth), so the widest bandwidth meeting ``sigma_required`` with
    the default readings is ``n · (σ_req · level / q)²``.  It is kept within
    [``bandwidth_min_hz``, :func:`widest_bandwidth`]; only when the narrowest
    bandwidth is still too noisy are readings added (averaging), up to
    ``max_repeats``.  Without a noise map yet, or without a requirement: the
    widest bandwidth and the default readings (they measure the scatter).
    """
    wide = widest_bandwidth(freq_hz, bandwidth_max_hz)
    narrow = min(float(bandwidth_min_hz), wide)
    if noise is None or not math.isfinite(sigma_required):
        return PointSettings(wide, repeats)
    q = float(noise.q(freq_hz))
    if q <= 0 or not math.isfinite(q):
        return PointSettings(wide, repeats)
    bw = repeats * (sigma_required * level_v / q) ** 2
    if bw >= narrow:
        return PointSettings(float(min(bw, wide)), repeats)
    need = math.ceil((q * math.sqrt(narrow) / level_v / sigma_required) ** 2)
    return PointSettings(narrow, int(min(max(need, repeats), max_repeats)))


def point_sigma(freq_hz: float, settings: PointSettings, level_v: float, noise: NoiseMap | None) -> float:
    """Predicted (absolute) σ of a point's mean reading at ``settings`` (inf without a noise map)."""
    if noise is None:
        return math.inf
    return float(noise.scatter(freq_hz, level_v, settings.bandwidth_hz)) / math.sqrt(settings.repeats)
