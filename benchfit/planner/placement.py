"""Where to measure next: one named rule per reason a point is worth its time.

* :func:`coarse_grid`: the first pass, a few log-spaced points per decade.
* :func:`crossing_points`: every gain and phase crossing of the fitted model
  that decides a margin (:func:`deciding_crossings`) gets measured points on
  both sides, close to it.
* :func:`beyond_crossing_points`: a phase crossing where the usable data end
  gets usable points above it.
* :func:`resonance_points`: every lightly damped pole or zero pair of the
  model near enough to 0 dB to matter (:func:`deciding_resonances`) gets
  enough points across its −3 dB width to locate f0 and Q.
* :func:`residual_points`: where the fit misses a point by more than its
  noise allows, the neighbourhood is measured more densely.
* :func:`variance_points`: the frequencies where one more point removes the
  most variance from PM and GM per second of instrument time.
* :func:`densify_points`: when the covariance cannot guide (see above), halve
  the spacing where the margins are decided.
* :func:`merge_new_points`: drops requests that duplicate a point already taken.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence

import numpy as np

#: Points measured on each side of a crossing must lie within this (decades).
CROSSING_SIDE_DECADES = 0.04
#: Usable data must reach this far (decades) above a deciding phase crossing.
BEYOND_DECADES = 0.1
#: Pole or zero pairs with Q at least this have a resonance worth resolving.
RESONANCE_MIN_Q = 1.0
#: Points wanted inside a resonance's −3 dB width.
POINTS_PER_WIDTH = 5
#: A point missed by more than this many σ (complex) shows the model wrong there:
#: for complex Gaussian noise P(|e| > 4σ) = exp(-16) per point.
RESIDUAL_SIGMAS = 4.0
#: Phase crossings with a gain margin beyond this (dB, either sign) decide nothing
#: a designer needs to the dB (a delay's phase spinning far below 0 dB): "more than
#: 30 dB" is all a margin that large needs to be known as (common practice, no source).
DECIDING_GM_DB = 30.0
#: Resonances where the model's |T| is more than this far from 0 dB (either way)
#: move neither margin (common practice, no source).
DECIDING_RESONANCE_DB = -20.0
#: New points closer than this (decades) to a taken one are not worth taking.
MIN_SPACING_DECADES = 0.004
#: A further variance pick must remove at least this fraction of what remains.
MIN_GAIN_FRACTION = 0.02


def coarse_grid(start_hz: float, stop_hz: float, per_decade: float) -> np.ndarray:
    """Log-spaced frequencies from ``start_hz`` to ``stop_hz``, ``per_decade`` per decade
    (both ends included, at least 5 points)."""
    n = max(int(math.ceil(per_decade * math.log10(stop_hz / start_hz))) + 1, 5)
    return np.logspace(math.log10(start_hz), math.log10(stop_hz), n)


def crossing_points(crossings_hz: Sequence[float], measured_hz: Sequence[float],
                    side_decades: float = CROSSING_SIDE_DECADES) -> list[float]:
    """Points that give each crossing a measured neighbour on both sides.

    Evidence weighed: where the model crosses (|T| = 1 or ∠T = −180°) and the
    measured frequencies.  A crossing interpolated between two points farther
    apart than ``side_decades`` on one side hangs on the model's shape; a point
    at half that distance on the bare side pins it.
    """
    x = np.log10(np.asarray(measured_hz, float)) if len(measured_hz) else np.zeros(0)
    out = []
    for fc in crossings_hz:
        if not (math.isfinite(fc) and fc > 0):
            continue
        xc = math.log10(fc)
        below = np.any((x < xc) & (x >= xc - side_decades))
        above = np.any((x > xc) & (x <= xc + side_decades))
        if not below:
            out.append(10 ** (xc - side_decades / 2))
        if not above:
            out.append(10 ** (xc + side_decades / 2))
    return out


def beyond_crossing_points(phase_crossings_hz: Sequence[float], usable_hz: Sequence[float],
                           band_top_hz: float, reachable: Callable[[float], bool],
                           beyond_decades: float = BEYOND_DECADES) -> list[float]:
    """Points above each phase crossing until the usable data reach ``beyond_decades`` past it.

    Evidence weighed: the model's phase crossings and the highest usable
    (not buried) point.  Above crossover |T| falls, and with it the signal a
    loop measurement by injection reads, so the usable data often end just
    above a phase crossing.  The draws that give the gain margin its σ move
    the crossing, and a draw whose crossing moves past the last usable point
    loses it: the margin is then decided by the model beyond the data.  A
    point half-way and one at ``beyond_decades`` past the crossing (at most the
    top of the band), each only when ``reachable`` says it can be measured
    above the noise, make the crossing one the data pin on both sides.  0.1
    decade is several times the spread of a crossing whose phase is known
    to a degree or two (common practice, no source).
    """
    top = max((float(f) for f in usable_hz), default=0.0)
    out = []
    for fc in phase_crossings_hz:
        if not (math.isfinite(fc) and 0 < fc < band_top_hz):
            continue
        target = min(fc * 10 ** beyond_decades, float(band_top_hz))
        if top >= target * 10 ** -MIN_SPACING_DECADES:
            continue
        for f in (math.sqrt(max(top, fc) * target), target):
            if f > top * 10 ** MIN_SPACING_DECADES and reachable(f):
                out.append(float(f))
    return out


def deciding_crossings(crossings) -> list[tuple[float, str]]:
    """(frequency, kind) of the crossings that decide a margin: every gain crossing,
    and the phase crossings whose gain margin lies within ±:data:`DECIDING_GM_DB`.

    Evidence weighed: the margins' crossing list.  A phase crossing 40 dB below
    0 dB (a delay's phase turning far above crossover) changes no margin a user
    needs to the dB; spending points on it only costs time.
    """
    out = []
    for c in crossings:
        f = float(c["freq_hz"])
        if not (math.isfinite(f) and f > 0):
            continue
        if c["kind"] == "gain" or abs(float(c["value"])) <= DECIDING_GM_DB:
            out.append((f, str(c["kind"])))
    return out


def deciding_resonances(resonances: Sequence[tuple[float, float]], response: Callable) -> list[tuple[float, float]]:
    """The resonances whose |T| at f0 lies within ±|:data:`DECIDING_RESONANCE_DB`| of 0 dB.

    Evidence weighed: the model's |T| at each resonance's f0.  Far from 0 dB (far
    below, or far above where the loop gain is large) a resonance moves neither
    margin, and in a noisy stretch of the band it is as likely the fit's picture
    of the noise as a real one.
    """
    out = []
    for f0, q in resonances:
        mag = abs(complex(np.asarray(response(np.array([f0])))[0]))
        if mag > 0 and abs(20 * math.log10(mag)) <= -DECIDING_RESONANCE_DB:
            out.append((f0, q))
    return out


def model_resonances(model) -> list[tuple[float, float]]:
    """(f0 in Hz, Q) of each complex pole or zero pair of a PlantModel with Q >= RESONANCE_MIN_Q."""
    out = []
    for roots in (model.poles, model.zeros):
        for r in roots:
            if r.imag > 0 and r.real != 0:
                w0 = abs(r)
                q = w0 / (2.0 * abs(r.real))
                if q >= RESONANCE_MIN_Q:
                    out.append((float(w0 / (2 * np.pi)), float(q)))
    return sorted(out)


def resonance_points(resonances: Sequence[tuple[float, float]], measured_hz: Sequence[float],
                     band: tuple[float, float], per_width: int = POINTS_PER_WIDTH) -> list[float]:
    """Points that fill each resonance's −3 dB width up to ``per_width`` measured points.

    Evidence weighed: the model's pole and zero pairs.  A pair of natural
    frequency f0 and quality factor Q has a −3 dB width of about f0/Q, from
    f0·(1 − 1/(2Q)) to f0·(1 + 1/(2Q)) (second-order resonance, standard
    result for Q >= 1).  f0 is the centre and Q the width, so both are fixed
    only when several points lie inside it; the missing ones are spread evenly
    across the width, away from the points already there.
    """
    f = np.asarray(measured_hz, float)
    out: list[float] = []
    for f0, q in resonances:
        lo, hi = f0 * (1 - 0.5 / q), f0 * (1 + 0.5 / q)
        if hi < band[0] or lo > band[1]:
            continue
        lo, hi = max(lo, band[0]), min(hi, band[1])
        have = f[(f >= lo) & (f <= hi)]
        missing = per_width - have.size
        if missing <= 0:
            continue
        cand = np.linspace(lo, hi, 2 * per_width + 1)
        taken = list(have) + out
        for _ in range(missing):
            if taken:
                d = np.min(np.abs(np.log10(cand)[:, None] - np.log10(np.asarray(taken))[None, :]), axis=1)
            else:
                d = np.ones(cand.size)
            k = int(np.argmax(d))
            out.append(float(cand[k]))
            taken.append(float(cand[k]))
    return out


def residual_points(freq_hz: np.ndarray, normalised_residual: np.ndarray,
                    threshold: float = RESIDUAL_SIGMAS) -> list[float]:
    """Midpoints (geometric) next to every point the fit misses by more than ``threshold`` σ.

    Evidence weighed: ``|measured − model| / σ`` per point (σ of the complex
    mean reading).  Noise alone exceeds the threshold at a point with
    probability exp(−threshold²) (complex Gaussian); a miss that large says
    the model lacks something there, which denser points will show.
    """
    f = np.asarray(freq_hz, float)
    r = np.asarray(normalised_residual, float)
    out = []
    for i in np.flatnonzero(r > threshold):
        if i > 0:
            out.append(math.sqrt(f[i] * f[i - 1]))
        if i + 1 < f.size:
            out.append(math.sqrt(f[i] * f[i + 1]))
    return out


def variance_points(candidates_hz: np.ndarray, log_draws: np.ndarray, targets: Sequence[np.ndarray],
                    target_sigmas: Sequence[float], point_sigma: Callable[[np.ndarray], np.ndarray],
                    point_cost_s: Callable[[np.ndarray], np.ndarray], n_max: int) -> list[float]:
    """Frequencies where a measurement removes the most margin variance per second.

    Evidence weighed: the parameter draws of the fit (see
    :mod:`benchfit.planner.uncertainty`).  At each candidate frequency the
    draws give the spread of ln|T| and of the phase, and their covariance
    with each asked quantity (PM, GM deviations, each scaled by its asked σ).
    Measuring there with noise σ_k (per component) removes, in the linear
    Gaussian approximation, ``c_kᵀ (Σ_k + σ_k² I)⁻¹ c_k`` of each quantity's
    variance (the Kalman update).  The candidate with the most removed
    variance per second of ``point_cost_s`` is taken, the covariances are
    updated as if it had been measured, and the next is chosen, until
    ``n_max`` points or the gain falls below :data:`MIN_GAIN_FRACTION`.

    Parameters
    ----------
    candidates_hz
        Candidate frequencies, shape (K,).
    log_draws
        ln T of each draw at the candidates, shape (N, K) complex.
    targets
        Per asked quantity, its draws (N,) (deviations; nan where lost).
    target_sigmas
        The asked σ of each quantity (scales them against each other).
    point_sigma
        Relative complex σ a new point at each candidate would have.
    point_cost_s
        Instrument time of a new point at each candidate.
    n_max
        Most points to return.
    """
    cand = np.asarray(candidates_hz, float)
    y = np.asarray(log_draws)
    if cand.size == 0 or y.shape[0] < 10:
        return []
    rows = np.all(np.isfinite(y), axis=1)
    cols = []
    for t, s in zip(targets, target_sigmas, strict=True):
        t = np.asarray(t, float)
        # a draw that lost the crossing has an infinite deviation: it tells no covariance
        fin = np.isfinite(t)
        if t.size == y.shape[0] and fin.sum() >= 2 and np.std(t[fin]) > 0:
            rows &= fin
            cols.append(t / s)
    if not cols or rows.sum() < 10:
        return []
    z = np.column_stack(cols)[rows]
    yy = y[rows]
    obs = np.concatenate([yy.real, yy.imag], axis=1)          # (N, 2K): ln|T| then phase
    data = np.concatenate([z, obs], axis=1)
    data = data - data.mean(axis=0)
    cov = data.T @ data / (data.shape[0] - 1)
    nq, k = z.shape[1], cand.size
    noise_var = (np.asarray(point_sigma(cand), float) / math.sqrt(2.0)) ** 2
    cost = np.maximum(np.asarray(point_cost_s(cand), float), 1e-9)
    picked: list[int] = [j for j in range(k) if not np.isfinite(noise_var[j])]   # would tell nothing
    skip = len(picked)
    while len(picked) - skip < int(n_max):
        total = float(np.trace(cov[:nq, :nq]))
        if total <= 0:
            break
        best, best_score, best_gain = -1, 0.0, 0.0
        for j in range(k):
            if j in picked:
                continue
            idx = [nq + j, nq + k + j]
            s = cov[np.ix_(idx, idx)] + noise_var[j] * np.eye(2)
            c = cov[:nq, idx]
            try:
                gain = float(np.trace(c @ np.linalg.solve(s, c.T)))
            except np.linalg.LinAlgError:
                continue
            if gain / cost[j] > best_score:
                best, best_score, best_gain = j, gain / cost[j], gain
        if best < 0 or best_gain < MIN_GAIN_FRACTION * total:
            break
        picked.append(best)
        idx = [nq + best, nq + k + best]
        s = cov[np.ix_(idx, idx)] + noise_var[best] * np.eye(2)
        c = cov[:, idx]
        cov = cov - c @ np.linalg.solve(s, c.T)
    return [float(cand[j]) for j in picked[skip:]]


def densify_points(decisive_hz: Sequence[float], measured_hz: Sequence[float],
                   zone_decades: float = 0.2) -> list[float]:
    """Geometric midpoints between the measured points within ±``zone_decades`` of each
    deciding frequency (and the gaps just outside the zone's measured ends).

    Evidence weighed: where the margins are decided and how densely it is
    measured.  Used when the fit's covariance cannot say where a point would
    help (no usable covariance, or draws the data contradict): then the
    surest gain is more points, of the deciding-point quality, where the
    margins are decided.
    """
    f = np.sort(np.asarray(measured_hz, float))
    out: list[float] = []
    if f.size < 2:
        return out
    x = np.log10(f)
    for d in decisive_hz:
        if not (math.isfinite(d) and d > 0):
            continue
        xd = math.log10(d)
        inside = np.flatnonzero(np.abs(x - xd) <= zone_decades)
        lo = max(int(inside[0]) - 1, 0) if inside.size else max(int(np.searchsorted(x, xd)) - 1, 0)
        hi = min(int(inside[-1]) + 1, f.size - 1) if inside.size else min(lo + 1, f.size - 1)
        for i in range(lo, hi):
            out.append(float(math.sqrt(f[i] * f[i + 1])))
    return out


def merge_new_points(new_hz: Sequence[float], measured_hz: Sequence[float], band: tuple[float, float],
                     min_spacing_decades: float = MIN_SPACING_DECADES) -> list[float]:
    """The requested points inside ``band``, sorted, without near-duplicates.

    Evidence weighed: distance in log frequency to points already taken and to
    each other; a point closer than ``min_spacing_decades`` to another adds
    almost nothing that a repeat reading would not, so it is dropped.
    """
    taken = list(np.log10(np.asarray(measured_hz, float))) if len(measured_hz) else []
    out = []
    for f in sorted(float(v) for v in new_hz):
        if not (band[0] <= f <= band[1]):
            continue
        x = math.log10(f)
        if taken and min(abs(x - t) for t in taken) < min_spacing_decades:
            continue
        out.append(f)
        taken.append(x)
    return out
