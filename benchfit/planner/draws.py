"""Parameter draws of a fit, for the margins' σ: which covariance, and in which coordinates.

Two choices, each a named rule (docs/capture.md, "How σ is found"):

* :func:`covariance_scale`: the fitter scales its covariance by the reduced
  χ² (the usual choice when the points' σ are only relative weights).  The
  planner's points carry σ from the measured noise, so a χ² below 1 is the
  noise being kind, not the points being better than measured; scaling the
  covariance down by it under-states the margins' σ.  The planner uses the
  covariance at ``max(χ²_red, 1)``.
* :func:`log_coordinates`: parameters that are positive by their nature (the
  gain of a loop that is not inverted, the frequency of a stable pole or a
  left-half-plane zero, a Q, a delay) are drawn in their logarithm.  The
  model's response depends on them through ratios (``s/ω``, ``gain·ω0²``), so
  the directions the data leave loose are straight lines in log coordinates
  and curves in linear ones: a linear draw along a loose direction (a gain and
  the frequency of a pair below the band, correlated −1.00) leaves the
  valley and the data contradict it, while a log draw stays in it.  For a
  parameter known to a few per cent the two are the same.
"""

from __future__ import annotations

import numpy as np

from benchfit.fitting.parameters import response


def covariance_scale(redchi: float) -> float:
    """Factor by which to multiply the fit's covariance (which is scaled by ``redchi``).

    Evidence weighed: the fit's reduced χ² against points whose σ was
    measured.  Above 1 the data scatter more than their σ says (noise the
    map under-states, or structure the model lacks), and the covariance is
    inflated by it, as the fitter does; below 1 the measured σ stands and the
    covariance is the unscaled ``(JᵀJ)⁻¹`` (the scale factor applied only
    when it exceeds 1: the Particle Data Group's rule for averaging
    measurements, Review of Particle Physics, "Introduction", from memory).
    Returns ``max(redchi, 1) / redchi`` (1 when ``redchi`` is not a positive
    number).
    """
    try:
        r = float(redchi)
    except (TypeError, ValueError):
        return 1.0
    if not (np.isfinite(r) and r > 0):
        return 1.0
    return max(r, 1.0) / r


def log_coordinates(names, values) -> np.ndarray:
    """Which parameters are drawn in their logarithm (boolean mask over ``names``).

    Evidence weighed: each parameter's kind and sign.  ``gain``, the ``*_hz``
    frequencies, the ``*_q`` factors and ``delay_s`` are drawn in log when
    their value is positive: their sign is part of the model's structure (a
    right-half-plane pole is a negative frequency, an inverted loop a
    negative gain) and a draw must not cross zero into the other structure.
    A parameter at zero or below stays linear.
    """
    names = list(names)
    v = np.asarray(values, float)
    kind = np.array([n == "gain" or n == "delay_s" or n.endswith("_hz") or n.endswith("_q")
                     for n in names], bool)
    return kind & np.isfinite(v) & (v > 0)


def draw_responses(fit, freq_hz: np.ndarray, n: int, rng: np.random.Generator) -> np.ndarray:
    """Responses of ``n`` parameter draws of ``fit`` at ``freq_hz`` (shape (n, len(freq_hz))).

    The varied parameters whose σ the fit determined are drawn from a normal
    distribution with the fit's covariance times :func:`covariance_scale`, in
    the coordinates :func:`log_coordinates` chooses (the covariance carried to
    log coordinates to first order, ``σ_ln v = σ_v / v``); the others stay at
    their values.
    """
    f = np.asarray(freq_hz, float).reshape(-1)
    names = [p.name for p in fit.parameters]
    base = fit.values
    draws = np.tile(base, (int(n), 1))
    idx = [names.index(v) for v in fit.varied]
    cov = np.asarray(fit.covariance, float) * covariance_scale(fit.stats.get("reduced_chi2"))
    known = [k for k in range(len(idx)) if np.isfinite(cov[k, k])] if idx else []
    if known:
        cols = [idx[k] for k in known]
        logs = log_coordinates([names[c] for c in cols], base[cols])
        d = np.where(logs, 1.0 / np.where(logs, base[cols], 1.0), 1.0)
        sub = cov[np.ix_(known, known)] * np.outer(d, d)
        evals, evecs = np.linalg.eigh(0.5 * (sub + sub.T))
        root = evecs * np.sqrt(np.clip(evals, 0.0, None))
        step = rng.standard_normal((int(n), len(known))) @ root.T
        x = base[cols]
        # a loose parameter's far draw may overflow: its response is not finite, and the
        # consistency test (or the lost-crossing count) drops it
        with np.errstate(over="ignore"):
            draws[:, cols] = np.where(logs, x * np.exp(np.where(logs, step, 0.0)), x + step)
    with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
        return response(fit.structure, draws, 2j * np.pi * f)
