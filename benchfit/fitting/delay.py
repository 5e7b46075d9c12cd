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

from collections.abc import Callable

import numpy as np
from scipy import optimize

from benchfit.fitting.order import (
    CHI_OK,
    NEGLIGIBLE,
    SCAN_ITER,
    SCAN_TOL,
    Attempt,
    Context,
    add_pole,
    attempt,
    better,
    choose_order,
    max_order,
)


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


#: Pole relocations per delay tried in a coarse search: each trial starts from the
#: previous one's poles, so a few steps follow the optimum (common practice, no source).
COARSE_ITER = 3


def search_delay(ctx: Context, order: int, lo: float, hi: float, poles0=None,
                 fine: bool = True, grid: int = 0) -> Attempt:
    """Delay in [lo, hi] minimising the VF residual at ``order``.

    Optionally a coarse grid of ``grid`` points first (the residual against
    the delay can have several minima at a fixed order), then a bounded scalar
    (Brent) search between the best grid point's neighbours.  Each evaluation
    is a short warm-started vector fit.  The fine resolution (1e-5 rad of
    phase at the top frequency) lets noiseless data reach its exact fit; the
    coarse one (1e-2 rad, few evaluations) is for scanning orders.
    """
    w_max = float(np.abs(ctx.s[-1])) * ctx.scale
    cache: list[Attempt] = []
    start = [poles0]
    iters = SCAN_ITER if fine else COARSE_ITER

    def cost(tau: float) -> float:
        a = attempt(ctx, order, float(tau), poles0=start[0], max_iter=iters, tol=SCAN_TOL)
        cache.append(a)
        if np.isfinite(a.chi):
            start[0] = a.vf.poles
        return a.chi

    if grid >= 3:
        taus = np.linspace(lo, hi, grid)
        chis = [cost(x) for x in taus]
        i = int(np.nanargmin(chis))
        lo, hi = taus[max(i - 1, 0)], taus[min(i + 1, grid - 1)]
        start[0] = cache[i].vf.poles if np.isfinite(cache[i].chi) else poles0
    opts = {"xatol": 1e-5 / w_max, "maxiter": 30} if fine else {"xatol": 1e-2 / w_max, "maxiter": 5}
    optimize.minimize_scalar(cost, bounds=(lo, hi), method="bounded", options=opts)
    return min(cache, key=lambda a: a.chi)


#: At this multiple of the floor an order is too low for the delay search to pay
#: (common practice, no source: a wrong delay costs far less than a missing pole there).
HOPELESS = 50.0


def delay_stepper(ctx: Context, tau0: float) -> Callable[[int], Attempt]:
    """An ``order -> Attempt`` step that searches the delay at each order.

    The search interval spans [τ/4, 2τ + 2/ω_max] around both the
    excess-phase estimate ``tau0`` and the last delay that fitted well (the
    excess-phase estimate is rough near resonances).
    """
    w_max = float(np.abs(ctx.s[-1])) * ctx.scale
    centre = [tau0]

    def step(n: int) -> Attempt:
        a0 = attempt(ctx, n, centre[0], max_iter=SCAN_ITER, tol=SCAN_TOL)
        if a0.chi > HOPELESS * CHI_OK:
            return a0  # far too few poles for any delay to matter; save the search
        lo = 0.25 * min(tau0, centre[0])
        hi = 2.0 * max(tau0, centre[0]) + 2.0 / w_max
        a = search_delay(ctx, n, lo, hi, a0.vf.poles, fine=False, grid=7)
        best = a if a.chi <= a0.chi else a0
        if best.chi <= 1.5 * CHI_OK:
            centre[0] = best.tau_s
        return best

    return step


def refine_delay(ctx: Context, a: Attempt) -> Attempt:
    """Fine delay search at ``a``'s order, within ±10 % (+2 % of a radian at f_max) of its delay."""
    w_max = float(np.abs(ctx.s[-1])) * ctx.scale
    span = 0.1 * a.tau_s + 2e-2 / w_max
    b = search_delay(ctx, a.order, max(a.tau_s - span, 0.0), a.tau_s + span, a.vf.poles)
    return b if b.chi <= a.chi else a


def _interval(ctx: Context, tau0: float) -> tuple[float, float]:
    """Delay search interval [0, 2τ0 + 2/ω_max] (the excess-phase estimate is rough
    near resonances, and a right-half-plane zero makes one where there is no delay;
    2/ω_max lets a small estimate grow)."""
    w_max = float(np.abs(ctx.s[-1])) * ctx.scale
    return 0.0, 2.0 * tau0 + 2.0 / w_max


def choose_delay_order(ctx: Context, tau0: float, n_max: int | None = None
                       ) -> tuple[Attempt, Attempt | None, list[Attempt]]:
    """Order and delay together, cheaply.

    The order is first scanned with the delay held at the excess-phase
    estimate ``tau0`` (:func:`choose_order`).  A wrong delay only ever costs
    extra poles, so the delay is then searched at the order found and at
    successively lower orders, stepping down while the lower order (with its
    own delay) is not significantly worse (:func:`better`).  The next order up
    is returned too: a delay can soak up part of a damped pair near the top
    of the band, and only the refinement can tell the two apart.

    Returns
    -------
    best, next_up, scan
        The chosen attempt, the one an order higher (or None) and the scan.
    """
    first, scan = choose_order(ctx, tau0, n_max=n_max, first_at_floor=True)
    by_order = {a.order: a for a in scan}
    lo, hi = _interval(ctx, tau0)
    n_res = 2 * ctx.s.shape[0]

    def searched(n: int, start: Attempt | None, grid: int = 7) -> Attempt:
        poles0 = start.vf.poles if start is not None and np.isfinite(start.chi) else None
        a = search_delay(ctx, n, lo, hi, poles0, fine=False, grid=grid)
        return a if start is None or a.chi <= start.chi else start

    cur = searched(first.order, first)
    while cur.order > 1 and cur.chi <= 1.5 * CHI_OK:
        low = searched(cur.order - 1, by_order.get(cur.order - 1), grid=5)
        exact = low.chi <= NEGLIGIBLE  # noiseless data: any exact fit will do, take the smaller
        if not np.isfinite(low.chi) or (not exact and better(low, cur, n_res)):
            break
        cur = low
    up = by_order.get(cur.order + 1)
    if up is None and cur.order + 1 <= max_order(ctx.s.shape[0]):
        up = attempt(ctx, cur.order + 1, cur.tau_s, poles0=add_pole(ctx, cur, 1),
                     max_iter=SCAN_ITER, tol=SCAN_TOL)
    nxt = searched(cur.order + 1, up, grid=5) if up is not None else None
    return cur, nxt, scan
