"""The fit the margins are judged on: fit(), then rules for parameters the data cannot place."""

from __future__ import annotations

import math

import numpy as np

from benchfit.errors import FitError
from benchfit.planner import placement as pl
from benchfit.planner.uncertainty import covariance_usable, margin_spread

#: A fit whose reduced χ² exceeds this does not describe the data within the noise,
#: so its covariance is not trusted to stop on (common practice, no source).
REDCHI_OK = 2.0


def slow_pole_as_integrator(fit, f_min_hz: float) -> bool:
    """True when the fit holds a real pole below the band, a candidate for an integrator.

    Evidence weighed: the fit's real pole frequencies against the band.  Above
    its frequency a real pole falls as 1/f with a phase heading for −90°, so
    one below ``f_min_hz`` looks over the band much like an integrator, and
    its frequency and the gain can hardly be told apart (their covariance is
    near singular, draws cross into the right half-plane).  A loop gain with
    an integrator measured in noise often ends so.  The caller refits with one
    more integrator and keeps that fit only when its residual stays within the
    noise and its parameters are identified.
    """
    for p in fit.parameters:
        if p.name.startswith("pole") and p.name.endswith("_hz") and 0 < p.value < f_min_hz:
            return True
    return False


#: Orders below the automatic choice tried by simpler_fit.
SIMPLER_STEPS = 3


def simpler_fit(resp, result, resid, identified, *, integrators: int = 0):
    """The fit to decide the margins with: ``result``, or a lower order whose parameters
    the data identify.

    Evidence weighed: whether the fit's covariance yields a σ (``identified``:
    a usable covariance whose draws the data do not contradict) and whether
    the residual stays within the noise (:func:`fit_adequate`).  The automatic
    order may keep a pole or pair that lowers the residual a little but that
    the data cannot place (two real poles at one frequency, a pair far outside
    the points); the margins do not need it, and its degenerate covariance
    hides the σ of those that matter.  Orders 1..SIMPLER_STEPS below are tried,
    highest first; the first that is identified and adequate wins, otherwise
    ``result`` stays.
    """
    from benchfit.fitting import fit

    order = int(result.stats.get("order") or 0) - int(result.integrators)
    for k in range(1, SIMPLER_STEPS + 1):
        if order - k < 1:
            break
        try:
            cand = fit(resp, order=order - k, integrators=integrators)
        except FitError:
            continue
        r = np.abs(resp.response - cand.response(resp.freq_hz)) / resp.stddev
        if fit_adequate(cand, r) and identified(cand, resp):
            return cand, r
    return result, resid


def identified(result, resp) -> bool:
    """True when the fit's parameter draws give the margins a σ: a usable covariance
    whose draws the data do not mostly contradict (see benchfit.planner.uncertainty)."""
    if not covariance_usable(result):
        return False
    spread = margin_spread(result, resp.f_min_hz, resp.f_max_hz, rng=np.random.default_rng(1),
                           data=resp, draws=100)
    return "contradict" not in spread.reason and "covariance" not in spread.reason


def fit_for_margins(resp, integrators: int | None = None):
    """The fit the margins are judged on, and ``|residual| / σ`` per point.

    :func:`benchfit.fitting.fit` (integrators ``auto`` unless given), then, when
    its parameters are not :func:`identified`: one more integrator when
    :func:`slow_pole_as_integrator` says so (kept only if adequate and
    identified), else :func:`simpler_fit`.  ``resp`` must carry a stddev column.
    """
    from benchfit.fitting import fit

    result = fit(resp, integrators=integrators if integrators is not None else "auto")
    resid = np.abs(resp.response - result.response(resp.freq_hz)) / resp.stddev
    if identified(result, resp):
        return result, resid
    if slow_pole_as_integrator(result, resp.f_min_hz):
        again = fit(resp, integrators=result.integrators + 1)
        r2 = np.abs(resp.response - again.response(resp.freq_hz)) / resp.stddev
        if fit_adequate(again, r2) and identified(again, resp):
            return again, r2
    return simpler_fit(resp, result, resid, identified, integrators=result.integrators)


#: The planner's fit starts this many decades below the lowest deciding frequency.
FIT_DECADES_BELOW = 1.5


def fit_band_start(decisive_hz, start_hz: float) -> float:
    """Where the planner's fit begins: :data:`FIT_DECADES_BELOW` below the lowest
    frequency that decides a margin, and not below the capture's start.

    Evidence weighed: the deciding frequencies of the last fit.  Far below the
    crossover a loop gain is large, so an injected measurement is noisy there
    (the injection is suppressed by the loop), and poles the data barely see
    make the covariance degenerate without moving a margin; the fit that
    decides the margins needs only the stretch around them.  The file keeps
    every point.
    """
    f = [d for d in decisive_hz if math.isfinite(d) and d > 0]
    if not f:
        return float(start_hz)
    return max(float(start_hz), min(f) * 10 ** -FIT_DECADES_BELOW)


def fit_adequate(fit, normalised_residual: np.ndarray) -> bool:
    """True when the fit describes the data within the noise, so its covariance can be trusted.

    Evidence weighed: the fit's reduced χ² (at most :data:`REDCHI_OK`) and
    whether any point is missed by more than
    :data:`~benchfit.planner.placement.RESIDUAL_SIGMAS` of its σ.  A model
    that misses structure has a covariance that speaks only for the wrong
    model; its margins' σ says nothing about the true loop's.
    """
    chi = fit.stats.get("reduced_chi2")
    chi = float(chi) if chi is not None else math.inf
    return bool(chi <= REDCHI_OK and not np.any(np.asarray(normalised_residual) > pl.RESIDUAL_SIGMAS))
