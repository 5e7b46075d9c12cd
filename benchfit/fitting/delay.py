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
    NEAR,
    SCAN_ITER,
    SCAN_TOL,
    Attempt,
    Context,
    OrderStepper,
    add_pole,
    attempt,
    better,
    choose_order,
    exact,
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
        slope = np.convolve(np.pad(slope, k, mode="reflect"), np.ones(2 * k + 1) / (2 * k + 1),
                            mode="same")[k:-k]
    excess = ph - 0.5 * np.pi * slope
    cut = lnw[-1] - top_fraction * (lnw[-1] - lnw[0])
    m = lnw >= cut
    if int(m.sum()) < 3:
        m = np.ones_like(m)
    a = np.vstack([np.ones(int(m.sum())), w[m]]).T
    coef = np.linalg.lstsq(a, excess[m], rcond=None)[0]
    return float(max(-coef[1], 0.0))


#: A delay whose phase at f_max is below this (rad) is not worth a parameter.
DELAY_MIN_PHASE = 0.05
#: Pole relocations per delay tried in a coarse search: each trial starts from the
#: previous one's poles, so a few steps follow the optimum (common practice, no source).
COARSE_ITER = 3


#: Delay resolution (rad of phase at f_max), Brent steps and relocations per trial, by level.
#: "fine" lets noiseless data reach its exact fit; "polish" is finer than the phase noise of
#: a good bench sweep (a few mrad); "coarse" is for scanning orders.
LEVELS = {"fine": (1e-5, 30, SCAN_ITER), "polish": (1e-3, 12, COARSE_ITER + 1),
          "coarse": (1e-2, 5, COARSE_ITER)}


def search_delay(ctx: Context, order: int, lo: float, hi: float, poles0=None,
                 level: str = "fine", grid: int = 0) -> Attempt:
    """Delay in [lo, hi] minimising the VF residual at ``order``.

    Optionally a coarse grid of ``grid`` points first (the residual against
    the delay can have several minima at a fixed order), then a bounded scalar
    (Brent) search between the best grid point's neighbours.  Each evaluation
    is a short warm-started vector fit; ``level`` sets the resolution
    (:data:`LEVELS`).
    """
    w_max = float(np.abs(ctx.s[-1])) * ctx.scale
    cache: list[Attempt] = []
    start = [poles0]
    xatol, maxiter, iters = LEVELS[level]

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
    optimize.minimize_scalar(cost, bounds=(lo, hi), method="bounded",
                             options={"xatol": xatol / w_max, "maxiter": maxiter})
    return min(cache, key=lambda a: a.chi)


#: At this multiple of the floor an order is too low for the delay search to pay
#: (common practice, no source: a wrong delay costs far less than a missing pole there).
#: 10 rather than 50 left every order, delay and pole of benchmarks/fit_accuracy.py's
#: seeds unchanged (and, in a scratch check, of delays from 30 ns to 1 µs) and saved a
#: fifth of the relocations.
HOPELESS = 10.0


def coarse_search(ctx: Context, order: int, lo: float, hi: float, poles0, grid: int
                  ) -> Attempt:
    """A coarse delay search, polished when it lands just above the floor.

    With little phase noise the residual's valley in the delay is narrower
    than the coarse resolution (1e-2 rad at f_max): a delay that is right to
    a few nanoseconds can leave the residual at 1.2× the floor and cost the
    order a pole.  So a result between the floor and :data:`NEAR` times it
    gets the fine search before the order is judged.
    """
    a = search_delay(ctx, order, lo, hi, poles0, level="coarse", grid=grid)
    if CHI_OK < a.chi <= NEAR * CHI_OK and finer_delay_may_reach_floor(ctx, a):
        a = refine_delay(ctx, a, level="polish")
    return a


def _refine_span(ctx: Context, a: Attempt) -> float:
    """Half-width of :func:`refine_delay`'s search around ``a``'s delay, s."""
    return 0.1 * a.tau_s + 2e-2 / (float(np.abs(ctx.s[-1])) * ctx.scale)


def finer_delay_may_reach_floor(ctx: Context, a: Attempt) -> bool:
    """True when moving ``a``'s delay within :func:`refine_delay`'s span could bring its
    residual down to the floor, so the polish of :func:`coarse_search` is worth running.

    Evidence weighed: ``a``'s own residual.  With b = phase residual / σ_φ and
    c = ω / σ_φ per point, a delay moved by δ changes the normalised χ²
    (:func:`~benchfit.fitting.order.attempt`) by −δ·mean(b·c) + ½δ²·mean(c²),
    the residues re-solved or not (re-solving projects out the same linear
    term; the quadratic one is never negative).  So no delay within the span δ
    can lower χ² by more than δ·|mean(b·c)|; when χ² less that stays above the
    floor (:data:`CHI_OK` squared) the polish cannot reach it.  The relocations the
    polish adds are not priced: where this rule ruled the polish out on the
    noisy 8-pole benchmark plant (seeds 0 and 1, order 6: normalised residual
    1.56, its bound 1.49 against 1.15) the polish had left the residual
    unchanged to four digits.
    """
    g, _ = ctx.target(a.tau_s)
    with np.errstate(all="ignore"):
        r = np.log(a.vf.at(ctx.s) / g)
    b = r.imag / ctx.sigma.phase
    c = np.abs(ctx.s) * ctx.scale / ctx.sigma.phase
    gain = _refine_span(ctx, a) * abs(float(np.mean(b * c)))
    return not (np.isfinite(gain) and a.chi ** 2 - gain > CHI_OK ** 2)


def held_delay_reaches_floor(a: Attempt) -> bool:
    """True when the delay held at ``a``'s order already leaves the residual at the floor.

    Evidence weighed: the normalised residual of the attempt with the delay
    held (:func:`delay_stepper`) against the floor, :data:`CHI_OK`.  A delay
    search there can only lower that residual (it keeps the held attempt when
    it finds nothing better), so the order scan, which stops at the first
    order at the floor, stops at this order either way; only a step down
    below it (:func:`choose_delay_order`) compares its residual with another,
    and that comparison searches first (:func:`searched_if_stepping_down`).
    On the noisy 8-pole benchmark plant this left out the search (16
    attempts, 44 relocations) at the order the delay scan chooses.
    """
    return bool(a.chi <= CHI_OK)


def delay_stepper(ctx: Context, tau0: float, lazy: bool = False) -> Callable[[int], Attempt]:
    """An ``order -> Attempt`` step that searches the delay at each order near the floor.

    Each order is first fitted like :func:`choose_order` does, with the delay
    held at the best estimate so far (``tau0``, the excess-phase estimate, at
    the start).  Unless the residual is still far above the floor
    (:data:`HOPELESS`), the delay is then searched over [0, 2τ + 2/ω_max]
    around both ``tau0`` and that estimate (the excess-phase estimate is rough
    near resonances, and a right-half-plane zero makes one where there is no
    delay), and the estimate moves to a delay that reaches the floor.  With
    ``lazy`` (an order scan that stops at the first order at the floor) an
    order whose held delay reaches the floor is not searched
    (:func:`held_delay_reaches_floor`); ``step.search(a)`` is the search it
    left out, exactly as it would have run.
    """
    w_max = float(np.abs(ctx.s[-1])) * ctx.scale
    base = OrderStepper(ctx, tau0)

    def search(a0: Attempt) -> Attempt:
        hi = 2.0 * max(tau0, a0.tau_s) + 2.0 / w_max
        a = coarse_search(ctx, a0.order, 0.0, hi, a0.vf.poles, grid=7)
        return a if a.chi <= a0.chi else a0

    def step(n: int) -> Attempt:
        a0 = base(n)
        if a0.chi > HOPELESS * CHI_OK:
            return a0  # far too few poles for any delay to matter; save the search
        if lazy and held_delay_reaches_floor(a0):
            step.unsearched = a0
            return a0
        best = search(a0)
        base.prev[-1] = best  # the next orders start from the searched poles
        if best.chi <= 1.5 * CHI_OK:
            base.tau_s = best.tau_s
        return best

    step.search, step.unsearched = search, None
    return step


def refine_delay(ctx: Context, a: Attempt, level: str = "fine") -> Attempt:
    """Delay search at ``a``'s order, within ±10 % (+2 % of a radian at f_max) of its delay."""
    span = _refine_span(ctx, a)
    b = search_delay(ctx, a.order, max(a.tau_s - span, 0.0), a.tau_s + span, a.vf.poles,
                     level=level)
    return b if b.chi <= a.chi else a


def exact_one_lower(ctx: Context, cur: Attempt, low: Attempt | None) -> Attempt | None:
    """An exact fit one order below ``cur`` at ``cur``'s delay, or None.

    Evidence weighed: the residual of one attempt at order n − 1 with the delay
    of ``cur`` (itself exact: noiseless data), warm-started from ``low`` (the
    scan's attempt at that order) when it has one, against
    :func:`~benchfit.fitting.order.exact`.  On noiseless data the step down of
    :func:`choose_delay_order` asks only whether the order below has an exact
    fit ("any exact fit will do, take the smaller"); when the delay that made
    ``cur`` exact gives one, the delay search there (a grid and Brent, 25 to
    60 relocations) cannot change that answer, and is left out until the walk
    ends: only the order it ends at is searched.  None sends the step down to
    the search as before.
    """
    poles0 = low.vf.poles if low is not None and np.isfinite(low.chi) else None
    a = attempt(ctx, cur.order - 1, cur.tau_s, poles0=poles0, max_iter=SCAN_ITER, tol=SCAN_TOL)
    return a if exact(a) else None


def searched_if_stepping_down(stepper, cur: Attempt) -> Attempt:
    """The delay search :func:`held_delay_reaches_floor` left out at ``cur``'s order, run
    before the order steps down below it: that step compares ``cur``'s residual with the
    order below, and the search can only lower it (so a step down that the held delay
    already refused stays refused)."""
    return stepper.search(cur)


def choose_delay_order(ctx: Context, tau0: float, n_max: int | None = None
                       ) -> tuple[Attempt, Attempt | None, list[Attempt]]:
    """Order and delay together.

    Orders are scanned with the delay searched at each order near the floor
    (:func:`delay_stepper`) up to the first order that reaches the floor.
    The order then steps down while one order less, with its own delay, is
    not significantly worse (:func:`better`): a delay found late may make a
    lower order enough.  The next order up is returned too: a delay can soak
    up part of a damped pair near the top of the band, and only the
    refinement can tell the two apart.

    Returns
    -------
    best, next_up, scan
        The chosen attempt, the one an order higher (or None) and the scan.
    """
    stepper = delay_stepper(ctx, tau0, lazy=True)
    first, scan = choose_order(ctx, step=stepper, n_max=n_max, first_at_floor=True)
    by_order = {a.order: a for a in scan}
    w_max = float(np.abs(ctx.s[-1])) * ctx.scale
    lo, hi = 0.0, 2.0 * max(tau0, first.tau_s) + 2.0 / w_max
    n_res = 2 * ctx.s.shape[0]

    def searched(n: int, start: Attempt | None, grid: int = 7) -> Attempt:
        poles0 = start.vf.poles if start is not None and np.isfinite(start.chi) else None
        a = coarse_search(ctx, n, lo, hi, poles0, grid=grid)
        return a if start is None or a.chi <= start.chi else start

    # The stepper searched the delay at every order not hopelessly far from the floor.
    cur = first if first.chi <= HOPELESS * CHI_OK else searched(first.order, first)
    unsearched = None  # an exact fit the step down took at the delay of the order above
    while cur.order > 1 and cur.chi <= 1.5 * CHI_OK:
        low = by_order.get(cur.order - 1)
        if low is None or low.chi > HOPELESS * CHI_OK:  # not searched by the stepper
            held = exact_one_lower(ctx, cur, low) if exact(cur) else None
            low = held if held is not None else searched(cur.order - 1, low, grid=5)
            unsearched = held if held is not None else unsearched
        low_exact = exact(low)  # noiseless data: any exact fit will do, take the smaller
        if not np.isfinite(low.chi) or (not low_exact and better(low, cur, n_res)):
            break
        if not low_exact and cur is stepper.unsearched:
            cur = searched_if_stepping_down(stepper, cur)
            if better(low, cur, n_res):
                break
        cur = low
    if unsearched is not None and cur is unsearched:
        # the order the step down ends at gets the delay search the walk left out
        cur = searched(cur.order, cur, grid=5)
    up = by_order.get(cur.order + 1)
    if up is None and cur.order + 1 <= max_order(ctx.s.shape[0]):
        up = attempt(ctx, cur.order + 1, cur.tau_s, poles0=add_pole(ctx, cur, 1),
                     max_iter=SCAN_ITER, tol=SCAN_TOL)
    nxt = searched(cur.order + 1, up, grid=5) if up is not None else None
    return cur, nxt, scan
