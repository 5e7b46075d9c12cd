"""Pure transport delay: a first estimate from the excess phase slope, then a 1-D search.

A delay adds phase −ωτ and no magnitude.  A rational minimum-phase response
has a phase tied to its magnitude slope; Bode's approximation (H. W. Bode,
*Network Analysis and Feedback Amplifier Design*, 1945, ch. 14) gives
φ ≈ (π/2)·d ln|H| / d ln ω.  What is left over (the excess phase) grows
linearly with ω when there is a delay; its slope is the first estimate.  The
estimate is then refined by minimising the vector-fitting residual over τ at
the chosen order, and finally fitted jointly with the poles and zeros by the
lmfit refinement.
"""

from __future__ import annotations

import numpy as np
from scipy import optimize

from benchfit.fitting.order import SCAN_ITER, SCAN_TOL, Attempt, Context, attempt


def excess_phase_delay(freq_hz: np.ndarray, h: np.ndarray, top_fraction: float = 0.3) -> float:
    """Delay estimate (s, >= 0) from the slope of the excess phase in the top of the band.

    Parameters
    ----------
    freq_hz, h
        The sweep.
    top_fraction
        Fraction of the log-frequency span (from the top) used for the slope.
    """
    f = np.asarray(freq_hz, dtype=float)
    w = 2.0 * np.pi * f
    lnm = np.log(np.abs(h))
    ph = np.unwrap(np.angle(h))
    lnw = np.log(w)
    slope = np.gradient(lnm, lnw)
    # Smooth the slope a little: noise in ln|H| is amplified by the derivative.
    k = max(1, f.shape[0] // 50)
    if k > 1:
        slope = np.convolve(np.pad(slope, k, mode="edge"), np.ones(2 * k + 1) / (2 * k + 1),
                            mode="same")[k:-k]
    excess = ph - 0.5 * np.pi * slope
    cut = lnw[-1] - top_fraction * (lnw[-1] - lnw[0])
    m = lnw >= cut
    if int(m.sum()) < 3:
        m = np.ones_like(m)
    a = np.vstack([np.ones(int(m.sum())), w[m]]).T
    coef = np.linalg.lstsq(a, excess[m], rcond=None)[0]
    return float(max(-coef[1], 0.0))


def search_delay(ctx: Context, order: int, tau0: float, poles0=None) -> Attempt:
    """Delay minimising the VF residual at ``order``, searched near ``tau0``.

    A bounded scalar search over [tau0/2, 1.5·tau0 + 2/ω_max]; each evaluation
    is a short warm-started vector fit.
    """
    w_max = float(np.abs(ctx.s[-1])) * ctx.scale
    lo, hi = 0.5 * tau0, 1.5 * tau0 + 2.0 / w_max
    cache: dict[float, Attempt] = {}
    start = [poles0]

    def cost(tau: float) -> float:
        a = attempt(ctx, order, float(tau), poles0=start[0], max_iter=SCAN_ITER, tol=SCAN_TOL)
        cache[float(tau)] = a
        if np.isfinite(a.chi):
            start[0] = a.vf.poles
        return a.chi

    res = optimize.minimize_scalar(cost, bounds=(lo, hi), method="bounded",
                                   options={"xatol": 2e-3 / w_max, "maxiter": 20})
    best = min(cache.values(), key=lambda a: a.chi)
    if float(res.x) in cache and cache[float(res.x)].chi <= best.chi:
        best = cache[float(res.x)]
    return best
