"""Hypotheses: vector-fitting candidates turned into refined, pruned models, and the race.

Stages 3 to 5 of docs/fitting.md: the order (and delay) scans give
candidates (:func:`candidates`); each is factored into physical parameters
and refined briefly (:func:`start`), pruned of the groups the data do not
need (:func:`benchfit.fitting.pruning.pruned`), and the information
criterion picks one (:func:`race`, rules in :mod:`benchfit.fitting.selection`).
"""

from __future__ import annotations

from dataclasses import replace
from typing import NamedTuple

import numpy as np

from benchfit.errors import FitError, InputError
from benchfit.fitting.delay import (
    choose_delay_order,
    delay_stepper,
    excess_phase_delay,
    refine_delay,
)
from benchfit.fitting.groups import (
    conform,
    dropped_phase_as_delay,
    groups_above,
    in_groups,
    without,
)
from benchfit.fitting.order import (
    CHI_OK,
    Attempt,
    Context,
    attempt,
    choose_order,
    max_order,
    polish,
)
from benchfit.fitting.parameters import TWO_PI, Structure, from_zpk
from benchfit.fitting.problem import (
    SCAN_POINTS,
    Problem,
    other_direct_worth_trying,
    rebuild_worth_trying,
)
from benchfit.fitting.pruning import pruned
from benchfit.fitting.refine import Refined
from benchfit.fitting.selection import (
    CLOSE_CALL,
    bic,
    bic_floor,
    delay_worth_testing,
    drop_allowed,
    prunable,
    screen,
)
from benchfit.fitting.vectfit import vf_to_zpk

#: When the no-delay scan's first order already reaches the floor, it restarts this
#: many orders lower.
DROP_STEP = 3


#: Orders the no-delay scan looks beyond the delay hypothesis's order when that one
#: reached the floor (common practice, no source: a delay near the top of the band
#: costs a pole or two, as a Padé-like pair, to model without the delay).
DELAY_ORDER_SPAN = 4


def no_delay_scan_top(with_delay: Attempt, n_cap: int) -> int:
    """Highest order the no-delay scan tries after the delay scan chose ``with_delay``.

    Evidence weighed: whether the delay hypothesis reached the noise floor
    (``chi <= CHI_OK``).  Only then does its order bound the no-delay scan: a
    delay mistaken for poles needs more of them, never fewer, and a few more
    (:data:`DELAY_ORDER_SPAN`) cover it.  A delay hypothesis still above the
    floor says nothing about the order without a delay (scikit-rf's
    ``wr2p2,line1.s2p`` S21: the delay scan stopped at order 2, 6e6 times the
    floor, and the bound it set, 6, stopped the no-delay scan at 377 times the
    floor while order 8 reaches it), so the no-delay scan runs to ``n_cap``
    under its own stopping rules (:func:`benchfit.fitting.order.choose_order`).
    """
    if np.isfinite(with_delay.chi) and with_delay.chi <= CHI_OK:
        return min(with_delay.order + DELAY_ORDER_SPAN, n_cap)
    return n_cap


class Hypothesis(NamedTuple):
    """A candidate model: its VF attempt, structure, refinement and notes."""

    att: Attempt
    st: Structure
    ref: Refined
    notes: list[str]



def candidates(ctx: Context, f: np.ndarray, order, delay) -> tuple[list[Attempt], list[Attempt]]:
    """Vector fits to refine: the best without a delay, and with one when ``delay="auto"``.

    With ``delay="auto"`` and a delay worth testing
    (:func:`benchfit.fitting.selection.delay_worth_testing`: excess phase), the
    order is first chosen with a delay searched at each order (starting from
    the excess-phase estimate), then without a delay up to a few orders more;
    without excess phase, the no-delay scan runs first and the delay scan
    follows when its residual stays above the noise.  A delay and a damped pair near the top of the
    band look alike to vector fitting, so both candidates are refined and
    compared afterwards (:func:`race`).  Scans run on a thinned sweep; the
    candidates' residues are re-solved on every point.

    Returns
    -------
    candidates, scan
    """
    h = ctx.h
    fixed_tau = float(delay) if not isinstance(delay, str) else 0.0
    tau0 = excess_phase_delay(f, h) if delay == "auto" else 0.0
    try_delay = delay == "auto" and delay_worth_testing(tau0, f[-1])
    sub = ctx.subsample(SCAN_POINTS)
    scan: list[Attempt] = []
    with_delay = None
    extra: list[Attempt] = []
    if order != "auto":
        n = int(order)
        att = attempt(sub, n, fixed_tau)
        if other_direct_worth_trying(att):
            ctx2 = replace(ctx, direct=not ctx.direct)
            alt = attempt(ctx2.subsample(SCAN_POINTS), n, fixed_tau)
            if alt.chi < att.chi:
                ctx, sub, att = ctx2, ctx2.subsample(SCAN_POINTS), alt
        if rebuild_worth_trying(att):
            # A fresh start may miss a weak feature; build up to n as the scan does.
            # Two orders below n are enough for the warm starts (the poles of n−1
            # plus a real pole, of n−2 plus a pair): from order 1 up gave the same
            # start on the scikit-rf files of benchmarks/fit_vs_reference.py at
            # twice the cost.
            scan = choose_order(sub, fixed_tau, n_min=max(1, n - 2), n_max=n, scan_all=True)[1]
            att = min([att, scan[-1]], key=lambda x: x.chi)
        if delay == "auto" and (try_delay or delay_worth_testing(tau0, f[-1], att.chi)):
            with_delay = refine_delay(sub, delay_stepper(sub, tau0)(n))
    elif try_delay:
        # Both hypotheses, the delay one first: its order bounds the no-delay scan
        # (a delay mistaken for poles needs more of them, never fewer).
        with_delay, nxt, scan_d = choose_delay_order(sub, tau0)
        extra = [nxt] if nxt is not None and np.isfinite(nxt.chi) else []
        # Below the delay order less two, the no-delay residual is far above the
        # floor (the delay scan's is already), so the no-delay scan starts there,
        # warm-started from the delay scan's poles; it restarts DROP_STEP orders
        # lower whenever its first order already reaches the floor.
        top = no_delay_scan_top(with_delay, max_order(sub.s.shape[0]))
        n0 = with_delay.order - 2 + DROP_STEP
        while True:
            n0 = max(1, n0 - DROP_STEP)
            prior = [a for a in scan_d if n0 - 2 <= a.order < n0 and np.isfinite(a.chi)]
            att, scan = choose_order(sub, fixed_tau, n_min=n0, n_max=top, prior=prior)
            if n0 == 1 or att.order > n0:
                break
        scan = scan + scan_d
    else:
        att, scan = choose_order(sub, fixed_tau)
        if delay == "auto" and delay_worth_testing(tau0, f[-1], att.chi):
            # No excess phase to speak of, but the residual stays above the noise:
            # a delay the phase estimate missed is a hypothesis too.
            with_delay, nxt, scan_d = choose_delay_order(sub, tau0)
            extra = [nxt] if nxt is not None and np.isfinite(nxt.chi) else []
            scan = scan + scan_d
    # The scans' poles (settled to 1e-4 near the floor) only start the refinement,
    # which is the estimator: they are carried to every point as they are.
    out = [polish(ctx, att)]
    for a in ([with_delay] if with_delay is not None else []) + extra:
        if np.isfinite(a.chi):
            out.append(polish(ctx, a))
    return out, scan


#: Evaluations of a start's first refinement (spurious zeros above the band make it slow:
#: one drifting off to infinity took all of 200 evaluations on the noisy 8-pole benchmark
#: plant, and they are pruned next).
START_NFEV = 40
#: Evaluations of a refinement that is meant to end at the optimum (the refiner's default).
FULL_NFEV = 200


def start(pb: Problem, att: Attempt, refit, idx: np.ndarray | None = None,
          max_nfev: int = START_NFEV) -> Hypothesis:
    """VF attempt -> physical parameters -> a first, capped refinement (and notes).

    No pole or zero vector fitting found is dropped unconditionally, however
    far above the band: those beyond :data:`FAR` × f_max go before the first
    refinement only when the drop test passes on the start's own values
    (:func:`drop_far`), the others are the pruning's question (:func:`pruned`).
    The structure is conformed to the parameters the user fixes or bounds
    (:func:`benchfit.fitting.groups.conform`).  ``refit`` refines on the points
    ``idx`` the scans used (all when None), with at most ``max_nfev`` evaluations.
    """
    ctx = pb.ctx
    m, scale = ctx.integrators, ctx.scale
    fit_delay = pb.delay == "auto" and att.tau_s > 0
    zeros, poles, k = vf_to_zpk(att.vf, scale)
    k_h = k * scale ** m  # the VF model was of H·(s/scale)^m
    has_delay = fit_delay or "delay_s" in pb.fixed
    st, v0 = from_zpk(zeros, poles, k_h, att.tau_s, integrators=m, delay=has_delay)
    st, v0 = conform(st, v0, pb.fixed, pb.bounds, order_given=pb.order != "auto")
    st, v0, notes = drop_far(pb, st, v0, idx)
    return Hypothesis(att, st, refit(st, v0, max_nfev=max_nfev), notes)


#: Groups beyond this multiple of the top frequency are tested for removal before the
#: first refinement (they slow it down: a zero at 1e4 × f_max has a Jacobian column of
#: almost nothing).
FAR = 3.0


def drop_far(pb: Problem, st: Structure, values: np.ndarray, idx: np.ndarray | None
             ) -> tuple[Structure, np.ndarray, list[str]]:
    """The start without its groups far above the band, when the data allow it.

    Evidence weighed: the χ² of the start's values as they are, with and
    without every group beyond :data:`FAR` × f_max (of the kinds
    :func:`benchfit.fitting.selection.prunable` allows), by
    :func:`benchfit.fitting.selection.drop_allowed`; a fitted delay takes over
    their phase (:func:`benchfit.fitting.groups.dropped_phase_as_delay`).
    Unrefined on both sides, so a group the refinement would need to move is
    kept here and left to the pruning.
    """
    may = prunable(pb)
    f_max = pb.f[-1]
    far = sorted(groups_above(st, values, FAR * f_max, poles=may["poles"], zeros=may["zeros"]),
                 key=lambda g: -g[1])
    w = TWO_PI * (pb.f if idx is None else pb.f[idx])
    n_res = 2 * w.shape[0]
    n_drop = 0
    # Every such group at once, then one at a time from the highest.
    for drop in ([[g for g, _ in far]] if len(far) > 1 else []) + [[g] for g, _ in far]:
        if not all(any(in_groups(nm, [g]) for nm in st.names) for g in drop):
            continue  # gone with an earlier trial
        st2, v2 = without(st, values, drop)
        if st2.delay and "delay_s" not in pb.fixed:
            v2 = v2.copy()
            v2[-1] += dropped_phase_as_delay(st, values, drop, w)
        kept, dropped = pb.evaluate(st, values, idx), pb.evaluate(st2, v2, idx)
        if drop_allowed(kept, dropped, len(st.names) - len(st2.names), n_res):
            st, values = st2, v2
            n_drop += len(drop)
    if not n_drop:
        return st, values, []
    return st, values, [f"dropped {n_drop} pole or zero group(s) beyond {FAR:g}× the top "
                        "frequency that cost less than the noise"]


def race(pb: Problem, cands: list[Attempt]) -> tuple[Hypothesis, bool]:
    """Start, prune and compare the candidates; the winner (not yet refined on every
    point unless the second value, ``refined``, is True: a single hypothesis, or a
    close call decided on every point).

    Hypotheses are refined, pruned and compared on the thinned copy the scans
    used (each decision is a χ² difference against ln N, valid at any N);
    a single one is refined and pruned on every point straight away, and the
    pruned outcome refined to the end there: that refinement is the one the
    result reports.
    """
    f, n_pts = pb.f, pb.n_points
    idx = pb.idx
    worth = screen(cands, 2 * idx.shape[0])
    single = len(worth) == 1
    if single:
        idx = np.arange(n_pts)
        refit_sub = trial_sub = pb.refiner()
    else:
        refit_sub = trial_sub = pb.refiner(idx)
    n_sub = 2 * idx.shape[0]
    starts: list[Hypothesis] = []
    missing: InputError | None = None
    for att in worth:
        try:
            starts.append(start(pb, att, refit_sub, None if single else idx))
        except InputError as e:
            # This hypothesis has no parameter the user holds or bounds: it is not
            # one the user asked about.  Only when none has it is that an error.
            missing = missing or e
        except (ValueError, np.linalg.LinAlgError):
            continue
    if not starts and missing is not None:
        raise missing
    # The most promising start is pruned first; a later one whose best possible
    # outcome is out of reach of the best so far is not worth its pruning.
    starts.sort(key=lambda o: bic(o.ref, n_sub))
    outcomes: list[Hypothesis] = []
    for hyp in starts:
        if outcomes and bic_floor(hyp.st, hyp.ref, f[-1], n_sub, pb.may_add_delay) > min(
                bic(o.ref, n_sub) for o in outcomes) + CLOSE_CALL:
            continue
        outcomes.append(Hypothesis(hyp.att, *pruned(pb, hyp.st, hyp.ref, hyp.notes, idx,
                                                    refit_sub, trial=trial_sub,
                                                    final_nfev=FULL_NFEV if single else None)))
    # A hypothesis whose refinement stopped at its cap is refined to the end when
    # it is still in the running; one far behind is left where it stopped.  (A
    # single one has had the whole budget already.)
    for i, o in enumerate(outcomes):
        if not single and not o.ref.success and bic(o.ref, n_sub) - min(
                bic(x.ref, n_sub) for x in outcomes) < 2 * CLOSE_CALL:
            outcomes[i] = o._replace(ref=refit_sub(o.st, o.ref.values))
    if not outcomes:
        raise FitError("vector fitting failed: the model does not evaluate on the band "
                       "(check the data for gaps or exact zeros)")
    # When the call is close, choose() refines the contenders on every point: the
    # winner's refinement is then the one on every point the result reports, and
    # final() does not repeat it.
    refit_all, on_all = pb.refiner(), []

    def refit_all_points(st: Structure, values: np.ndarray, **kw) -> Refined:
        on_all.append(refit_all(st, values, **kw))
        return on_all[-1]

    best = choose(outcomes, n_sub, 2 * n_pts, refit_all_points)
    return best, single or any(best.ref is r for r in on_all)


def choose(outcomes: list[Hypothesis], n_sub: int, n_all: int, refit_all) -> Hypothesis:
    """The hypothesis with the lowest BIC (:func:`benchfit.fitting.selection.bic`).

    Delay or no delay, one order or the next: BIC rather than AIC, since a
    many-pole rational can mimic a delay and BIC's stronger penalty keeps the
    simpler explanation unless the data insist.  When the best ones on the
    thinned copy (``n_sub`` residuals) are within :data:`CLOSE_CALL`, they are
    refined on every point (``refit_all``, ``n_all`` residuals) and compared
    again there.  A hypothesis whose delay came out negative is no model of a
    transport delay: it competes only when every one did.
    """
    valid = [o for o in outcomes if not (o.st.delay and o.ref.values[-1] < 0)]
    outcomes = sorted(valid or outcomes, key=lambda o: bic(o.ref, n_sub))
    best = bic(outcomes[0].ref, n_sub)
    close = [o for o in outcomes if bic(o.ref, n_sub) - best < CLOSE_CALL]
    if len(close) > 1 and n_sub != n_all:
        close = [o._replace(ref=refit_all(o.st, o.ref.values)) for o in close]
        close.sort(key=lambda o: bic(o.ref, n_all))
        return close[0]
    return outcomes[0]
