"""How well the margins are known: the fit's covariance carried to PM and GM by sampling.

Method (documented in docs/capture.md): the physical parameters of the fit
(gain, pole and zero frequencies, Q, delay) are drawn ``draws`` times from a
normal distribution with the fit's covariance
(:meth:`~benchfit.fitting.result.FitResult.draw_responses`); each drawn loop
is evaluated on a log grid over the captured band, made denser around every
crossing of the nominal model, and its margins are computed with
:func:`~benchfit.loop.margins.margins_batch`.  The σ of a margin is half the
width of the central 68 % of the draws' deviations from the nominal model
evaluated the same way (for a normal spread that is σ; for a skewed one it
ignores the tails that a plain standard deviation would let dominate).
Sampling rather than linearising keeps the nonlinear map from, e.g., Q to
phase margin honest when the spread is wide.  When the covariance is
missing, or more than :data:`LOST_FRACTION` of the draws lose the crossing,
the σ is infinite: the margin is not known yet.  With the measured data at
hand, draws the data contradict are dropped first (:func:`consistent_draws`):
the linear approximation behind the covariance fails for poorly identified
parameters, and such a draw would stand for a loop the measurement rules out.

The same draws give, at candidate frequencies, the spread of the model's
log-magnitude and phase and their covariance with the margins, which
:func:`benchfit.planner.placement.variance_points` uses to choose where to measure.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from benchfit.loop.margins import Margins, margins_batch, margins_of_model
from benchfit.planner.draws import covariance_scale, draw_responses

#: Parameter draws per estimate.
DRAWS = 400
#: Fraction of draws a fit the covariance describes well loses to the consistency test.
REJECT_P = 1e-3
#: Fewer consistent draws than this fraction: the σ is not known.
MIN_CONSISTENT = 0.25
#: Draws that lose a crossing (nan PM) beyond this fraction make the σ infinite.
LOST_FRACTION = 0.05
#: Grid points per decade for the draws, plus this many around each crossing.
GRID_PER_DECADE = 80
CROSSING_POINTS = 41
#: Half-width (decades) of the dense patch around each crossing.
CROSSING_DECADES = 0.08


@dataclass(frozen=True, eq=False)
class MarginSpread:
    """Margins of the fitted loop with their σ, and the draws behind them.

    Attributes
    ----------
    margins
        Margins of the nominal fitted model over the captured band.
    pm_sigma_deg, gm_sigma_db
        σ of the phase margin and gain margin (inf when not known).
    pm_draws, gm_draws
        Deviations of each draw's PM and GM from the nominal (nan where lost).
    grid_hz
        The frequencies the draws were evaluated at.
    log_draws
        ln T of each draw on ``grid_hz``, shape (draws, len(grid_hz)), phase
        unwrapped relative to the nominal model.
    reason
        Why σ is infinite, or "".
    """

    margins: Margins
    pm_sigma_deg: float
    gm_sigma_db: float
    pm_draws: np.ndarray
    gm_draws: np.ndarray
    grid_hz: np.ndarray
    log_draws: np.ndarray
    reason: str = ""


def robust_sigma(x: np.ndarray) -> float:
    """Half the 16..84 % interval of the finite values (σ for a normal spread)."""
    x = np.asarray(x, float)
    x = x[np.isfinite(x)]
    if x.size < 10:
        return math.inf
    lo, hi = np.percentile(x, [15.865, 84.135])
    return float(0.5 * (hi - lo))


def _grid(f_lo: float, f_hi: float, m: Margins) -> np.ndarray:
    n = max(int(GRID_PER_DECADE * math.log10(f_hi / f_lo)), 50)
    parts = [np.logspace(math.log10(f_lo), math.log10(f_hi), n)]
    for c in m.crossings:
        fc = float(c["freq_hz"])
        if math.isfinite(fc) and f_lo < fc < f_hi:
            parts.append(fc * np.logspace(-CROSSING_DECADES, CROSSING_DECADES, CROSSING_POINTS))
    g = np.unique(np.concatenate(parts))
    return g[(g >= f_lo) & (g <= f_hi)]


def covariance_usable(fit) -> bool:
    """True when every varied parameter has a finite, positive σ and the covariance is finite.

    Evidence weighed: the fit's own covariance.  Without it the draws would all
    equal the nominal model and report a σ of zero, a margin 'known' that is
    not; so such a fit counts as not knowing the margins.
    """
    cov = np.asarray(fit.covariance, float)
    if not fit.varied or cov.size == 0 or not np.all(np.isfinite(cov)):
        return False
    by_name = {p.name: p for p in fit.parameters}
    return all(math.isfinite(by_name[v].stderr) and by_name[v].stderr > 0 for v in fit.varied
               if v in by_name)


def consistent_draws(at_data: np.ndarray, measured: np.ndarray, stddev: np.ndarray,
                     nominal: np.ndarray, n_params: int, redchi: float) -> np.ndarray:
    """Which parameter draws the data do not contradict (boolean mask).

    Evidence weighed: each draw's χ² against the measured points, less the
    nominal model's.  For draws from the fit's linearised covariance this
    excess, divided by the reduced χ² the covariance was scaled with, follows
    a χ² law with one degree of freedom per varied parameter; a draw beyond
    its 1 - :data:`REJECT_P` quantile is one where the linearisation fails
    (a poorly identified pole drawn through zero into the right half-plane
    turns the phase of the whole band) and is dropped.  For a fit the
    covariance describes well this drops a fraction REJECT_P of the draws.

    A draw whose response is not finite at a point is dropped.  One point
    alone that exceeds the whole allowance rejects its draw, so each point's
    deviation is capped at that (a loose parameter's far draw can reach
    1e160, whose square would overflow); the capped sum still exceeds the
    limit, and no verdict changes.
    """
    from scipy.stats import chi2

    sd = np.asarray(stddev, float)
    w = 2.0 / sd ** 2                       # complex σ: σ²/2 in each component
    c_nom = float(np.sum(w * np.abs(nominal - measured) ** 2))
    limit = chi2.ppf(1.0 - REJECT_P, max(int(n_params), 1)) * max(redchi, 1e-12)
    dev = np.abs(at_data - measured[None, :])
    finite = np.all(np.isfinite(dev), axis=1)
    # w·cap² = 2·(limit + c_nom): a point at its cap alone puts the draw past the limit
    cap = np.sqrt(2.0 * (limit + c_nom) / w)
    dev = np.minimum(np.where(np.isfinite(dev), dev, cap), cap)
    c = np.sum(w * dev ** 2, axis=1)
    return finite & ((c - c_nom) <= limit)


def margin_spread(fit, f_lo: float, f_hi: float, *, draws: int = DRAWS,
                  rng: np.random.Generator | None = None, data=None) -> MarginSpread:
    """PM and GM of ``fit`` over ``f_lo..f_hi`` Hz with σ from parameter sampling (module notes).

    With ``data`` (the FrequencyResponse fitted, with its stddev), draws the
    data contradict are dropped first (:func:`consistent_draws`).
    """
    rng = np.random.default_rng(0) if rng is None else rng
    m = margins_of_model(fit.model, f_min_hz=f_lo, f_max_hz=f_hi)
    grid = _grid(f_lo, f_hi, m)
    nominal = fit.response(grid)
    if not covariance_usable(fit):
        empty = np.full(0, np.nan)
        return MarginSpread(m, math.inf, math.inf, empty, empty, grid,
                            np.zeros((0, grid.size), complex), "the fit has no usable covariance")
    if data is not None:
        both = draw_responses(fit, np.concatenate([grid, data.freq_hz]), draws, rng)
        T, at_data = both[:, :grid.size], both[:, grid.size:]
        redchi = float(fit.stats.get("reduced_chi2") or 1.0)
        keep = consistent_draws(at_data, data.response, data.stddev,
                                fit.response(data.freq_hz), len(fit.varied),
                                redchi * covariance_scale(redchi))
        if keep.mean() < MIN_CONSISTENT:
            empty = np.full(0, np.nan)
            return MarginSpread(m, math.inf, math.inf, empty, empty, grid,
                                np.zeros((0, grid.size), complex),
                                "most parameter draws contradict the data (the linearised "
                                "covariance does not describe this fit)")
        T = T[keep]
        draws = T.shape[0]
    else:
        T = draw_responses(fit, grid, draws, rng)
    b = margins_batch(grid, np.vstack([nominal, T]),
                      unstable_open_loop_poles=m.open_loop_unstable_poles)
    pm, gm = b["pm_deg"], b["gm_db"]
    dpm = pm[1:] - pm[0]
    reason = ""
    if not math.isfinite(pm[0]) or np.mean(~np.isfinite(dpm)) > LOST_FRACTION:
        pm_sigma = math.inf
        reason = "the gain crossing is lost in too many parameter draws"
    else:
        pm_sigma = robust_sigma(dpm)
    if math.isinf(gm[0]) and np.all(np.isinf(gm[1:])):
        dgm = np.zeros(draws)            # no phase crossing in the band in any draw
        gm_sigma = 0.0
    else:
        with np.errstate(invalid="ignore"):      # inf - inf: a draw without the crossing
            dgm = gm[1:] - gm[0]
        if not math.isfinite(gm[0]) or np.mean(~np.isfinite(dgm)) > LOST_FRACTION:
            gm_sigma = math.inf
            reason = reason or "the phase crossing is lost in too many parameter draws"
        else:
            gm_sigma = robust_sigma(dgm)
    ln_nom = np.log(nominal)
    ln = np.log(T)
    # phase relative to the nominal, wrapped to (-pi, pi]: the draws' spread, not their turns
    dphi = np.angle(np.exp(1j * (ln.imag - ln_nom.imag)))
    log_draws = (ln.real + 1j * (ln_nom.imag + dphi))
    return MarginSpread(m, pm_sigma, gm_sigma, dpm, dgm, grid, log_draws, reason)
