"""The rules that choose between models: information criteria and the drop test.

Every choice the fit makes between two models (keep or drop a group, delay
or no delay, stable or unstable, which hypothesis to refine) is one of the
named functions here, each weighing the evidence its docstring names:

* :func:`bic` / :func:`result_bic` — Schwarz's criterion of a refinement or
  of a finished fit;
* :func:`screen` — which vector-fitting candidates are worth refining
  (:func:`distinct`: one start per hypothesis);
* :func:`bic_floor` — the best a start could reach by pruning (to skip
  hopeless ones);

The drop rules (:mod:`benchfit.fitting.pruning`) ask these functions; the
stage order is in :func:`benchfit.fitting.api.fit` and docs/fitting.md.
"""

from __future__ import annotations

import numpy as np

from benchfit.fitting.delay import DELAY_MIN_PHASE
from benchfit.fitting.groups import RHP_NEAR_TOP, cancelling, groups_above, in_groups, unidentified
from benchfit.fitting.order import CHI_OK, NEGLIGIBLE, PLATEAU, Attempt
from benchfit.fitting.parameters import TWO_PI, Structure
from benchfit.fitting.problem import Problem
from benchfit.fitting.refine import Refined
from benchfit.fitting.result import FitResult

#: Hypotheses whose BIC on the thinned copy differ by less than this are compared again
#: on every point (a difference above 10 is "very strong" evidence: R. E. Kass and
#: A. E. Raftery, "Bayes factors", J. Amer. Statist. Assoc. 90(430), 1995).
CLOSE_CALL = 10.0
#: A candidate whose vector-fitting BIC is worse than the best one's by more than this
#: fraction of the number of residuals is not worth refining (VF's fixed point is within
#: a few percent of the least-squares optimum in χ²: common practice, no source).
SCREEN = 0.25


def bic(ref: Refined, n_res: int) -> float:
    """Schwarz's Bayesian information criterion of a refined fit (Gaussian residuals,
    scale estimated): N·ln(χ²/N) + p·ln N (G. Schwarz, Ann. Statist. 6(2), 1978)."""
    # Fits far below the noise floor (noiseless data) are equally exact: compare their size only.
    chisqr = max(ref.chisqr, n_res * NEGLIGIBLE ** 2)
    return float(n_res * np.log(chisqr / n_res) + len(ref.varied) * np.log(n_res))


def result_bic(result: FitResult) -> float:
    """Schwarz's criterion of a finished fit on all its points (see :func:`bic`)."""
    n_res = 2 * result.stats["points"]
    p = len(result.varied)
    chisqr = max(result.stats["reduced_chi2"] * max(n_res - p, 1), n_res * NEGLIGIBLE ** 2)
    return float(n_res * np.log(chisqr / n_res) + p * np.log(n_res))


def screen(cands: list[Attempt], n_res: int) -> list[Attempt]:
    """Candidates worth refining: finite, distinct (:func:`distinct`), and not hopeless
    against the best by BIC."""
    ok = distinct([a for a in cands if np.isfinite(a.chi)])
    if len(ok) <= 1:
        return ok

    def bic(a: Attempt) -> float:
        p = 2 * a.order + (1 if a.tau_s > 0 else 0) + 1
        return n_res * np.log(max(a.chi, NEGLIGIBLE) ** 2) + p * np.log(n_res)

    best = min(bic(a) for a in ok)
    return [a for a in ok if bic(a) - best <= SCREEN * n_res]


def distinct(cands: list[Attempt]) -> list[Attempt]:
    """The candidates with every repeat of one hypothesis left out but its best start.

    Evidence weighed: the order and delay of each vector-fitting attempt, and
    its normalised residual.  Two attempts at the same order with the same
    delay (in practice: both without one, when the delay search ended at
    zero) are the same hypothesis from two starts; only the one with the
    lower residual is refined (the other led, on the noiseless 8-pole
    benchmark plant, to the same optimum at the cost of a second start and
    pruning).  Order of the list is kept.
    """
    best: dict[tuple[int, float], Attempt] = {}
    for a in cands:
        key = (a.order, float(a.tau_s))
        if key not in best or a.chi < best[key].chi:
            best[key] = a
    return [a for a in cands if best[(a.order, float(a.tau_s))] is a]


def bic_floor(st: Structure, ref: Refined, f_max: float, n_res: int,
               add_delay: bool = False) -> float:
    """The lowest BIC pruning could bring a start ``ref`` to, or −inf when unknown.

    Pruning removes parameters (at most every zero group above the band or
    near its top, every cancelling group and every group the data cannot
    locate) and never lowers χ² below the
    optimum of the larger model it is nested in.  So when the first
    refinement converged, its χ² with the fewest parameters pruning could
    leave is a floor; a capped refinement may still go down and gives none.
    ``add_delay``: pruning may swap lagging zeros for a delay (:func:`prune_above`).
    """
    if not ref.success or not np.isfinite(ref.chisqr):
        return -np.inf
    cancel = [g for pair in cancelling(st, ref.values) for g in pair] + unidentified(st, ref)
    near = RHP_NEAR_TOP * f_max
    p_min = min(
        sum(1 for nm in ref.varied if not in_groups(nm, cancel + [g for g, _ in groups_above(
            st, ref.values, f_max, rhp_from=near if st.delay or swap else None)])) + int(swap)
        for swap in ((False, True) if add_delay and not st.delay else (False,)))
    chisqr = max(ref.chisqr, n_res * NEGLIGIBLE ** 2)
    return float(n_res * np.log(chisqr / n_res) + p_min * np.log(n_res))


#: A smaller model may not raise the reduced χ² by more than this fraction over the
#: larger one's (or over the floor, CHI_OK², when the larger one is below it): the
#: same fraction below which vector fitting's own residual gains are not evidence
#: (order.PLATEAU).
REDCHI_RISE = PLATEAU


def redchi_allows(kept: Refined, dropped: Refined) -> bool:
    """True when the smaller model's reduced χ² stays where the larger one's is.

    Evidence weighed: the reduced χ² (residual over the measured noise,
    squared) of ``dropped`` against ``max(kept's, CHI_OK²)`` raised by
    :data:`REDCHI_RISE`.  A drop may never take a fit at the floor above it,
    nor a fit above the floor further up, whatever the information criterion
    (or a waiver such as "below the noise at every point") says.
    """
    if not (np.isfinite(dropped.redchi) and np.isfinite(kept.redchi)):
        return False
    return bool(dropped.redchi <= max(kept.redchi, CHI_OK ** 2) * (1.0 + REDCHI_RISE))


def noise_scale(kept: Refined) -> float:
    """The unit a χ² difference between ``kept`` and a model nested in it is measured in:
    ``kept``'s reduced χ² (its noise scale), floored at NEGLIGIBLE²
    (:data:`~benchfit.fitting.order.NEGLIGIBLE`), where :func:`bic` counts fits as
    equally exact.

    Without the floor a noiseless fit (the 8-pole benchmark plant, σ floored at
    1e-10, reduced χ² 2.5e-13 at its vector-fitting start) measured differences
    at rounding level against a bar of ln N, and which nested model won
    depended on how far each refinement had chased rounding.
    """
    return max(float(kept.redchi), NEGLIGIBLE ** 2)


def ic_allows(kept: Refined, dropped: Refined, n_params: int, n_res: int) -> bool:
    """True when the information criterion prefers (or ties) the smaller model.

    Evidence weighed: the rise of χ², in units of the kept model's reduced χ²
    (its noise scale, :func:`noise_scale`), against Schwarz's penalty ln N per parameter removed
    (G. Schwarz, Ann. Statist. 6(2), 1978): the smaller model's BIC is not
    higher.  Above the band a zero's phase, −ω/ω_z, is a delay's phase, so a
    plain 95 % likelihood-ratio test (3.8 per parameter) let noise buy a
    spurious zero that stole part of the delay and shrank its error bar.
    """
    if not (np.isfinite(kept.redchi) and np.isfinite(dropped.chisqr)):
        return False
    return bool((dropped.chisqr - kept.chisqr) / noise_scale(kept) <= np.log(n_res) * n_params)


def drop_allowed(kept: Refined, dropped: Refined, n_params: int, n_res: int,
                 waived: bool = False) -> bool:
    """True when the data allow the smaller model ``dropped`` (``n_params`` fewer) in
    place of ``kept``: both :func:`ic_allows` and :func:`redchi_allows`.

    ``waived``: the caller has shown the dropped groups cannot be identified
    (narrower than the point spacing, below the noise at every point), so the
    information criterion is not asked; the reduced χ² still is.
    """
    return (waived or ic_allows(kept, dropped, n_params, n_res)) and redchi_allows(kept, dropped)


def above_band_trials(pb: Problem) -> bool:
    """True when the pruning runs every trial of :func:`benchfit.fitting.pruning.prune_above`;
    False when it tries the groups above the band all at once and then only those the
    data locate loosely (:func:`benchfit.fitting.pruning.prune_loose`).

    Evidence weighed: the options.  With ``--order auto`` every group above the
    band must earn its place (docs/fitting.md, model choice).  With ``--order
    N`` the user has set the model's size and no pole may go; a zero above the
    band that the refinement locates to better than 20 % is not tried alone (its
    linearised drop cost is over four times the drop test's bar), one located
    more loosely is.  Trying each such zero alone cost a third to a half of a
    fixed-order fit on 201-point files and on the noisy 8-pole benchmark plant,
    and none of those trials passed on ``benchmarks/fit_vs_reference.py``'s
    cases; the drops that did pass were all the zeros above the band at once
    (noiseless 8-pole plant) or a loosely located one (the two-pole family).  A delay that could
    take over lagging zeros (``--delay auto``) is a hypothesis of its own and
    keeps the full set of trials.
    """
    return pb.order == "auto" or pb.may_add_delay


def prunable(pb: Problem) -> dict[str, bool]:
    """Which kinds of group pruning may try to remove, as flags ``poles``, ``zeros``
    and ``cancelling`` (a pole group with a zero group).

    What the user asked is honoured: with ``--order N`` no pole goes (the model
    keeps N poles); a kind the user fixes or bounds a parameter of is left
    alone (its names must not shift).
    """
    poles = pb.order == "auto" and not pb.held("pole", "pair")
    zeros = not pb.held("zero")
    return {"poles": poles, "zeros": zeros, "cancelling": poles and zeros}


#: A fit with mirrored poles whose residual stays above this multiple of the floor loses
#: to the unmirrored one that reaches the floor (see unstable_wins; common practice, no source).
UNSTABLE_RETRY = 1.3


def unstable_wins(mirrored: FitResult, unmirrored: FitResult) -> bool:
    """True when the fit that keeps right-half-plane poles replaces the mirrored one.

    Evidence weighed: the mirrored fit stays above :data:`UNSTABLE_RETRY`
    times the noise floor while the unmirrored one reaches the floor
    (:data:`~benchfit.fitting.order.CHI_OK`) or halves the residual; or the
    unmirrored fit's BIC is lower by more than :data:`CLOSE_CALL` (the
    mirrored fit can reach the floor with a contrived structure, e.g. a sign
    flip made of a pole and zero far below the band).  A stable plant's fit
    rarely ends with mirrored poles: none of the 120 fits of
    benchmarks/fit_accuracy.py does (it prints the count).
    """
    chi, alt_chi = mirrored.stats["residual_over_floor"], unmirrored.stats["residual_over_floor"]
    return bool((chi > UNSTABLE_RETRY and (alt_chi <= CHI_OK or alt_chi < 0.5 * chi))
                or result_bic(unmirrored) < result_bic(mirrored) - CLOSE_CALL)


def delay_worth_testing(tau0_s: float, f_max_hz: float, chi_without: float | None = None
                        ) -> bool:
    """True when a delay is a hypothesis to fit beside the no-delay one.

    Evidence weighed: the excess-phase estimate ``tau0_s``
    (:func:`benchfit.fitting.delay.excess_phase_delay`) when its phase at the
    top of the band reaches :data:`~benchfit.fitting.delay.DELAY_MIN_PHASE`;
    or, given ``chi_without`` (the no-delay scan's normalised residual), a
    residual that stays above the noise floor
    (:data:`~benchfit.fitting.order.CHI_OK`): the phase estimate is rough
    near resonances, and a missed delay leaves structure in the residual.
    Which hypothesis wins is then the information criterion's call
    (:func:`benchfit.fitting.hypotheses.choose`).
    """
    if tau0_s * TWO_PI * f_max_hz >= DELAY_MIN_PHASE:
        return True
    return chi_without is not None and bool(np.isfinite(chi_without) and chi_without > CHI_OK)


def unstable_demanded(unstable: FitResult, stable: FitResult) -> tuple[bool, float]:
    """Whether the data demand the right-half-plane poles of ``unstable``, and by how much.

    Evidence weighed: the BIC of both fits on every point
    (:func:`result_bic`).  Returns ``(demanded, margin)`` with ``margin`` the
    stable fit's BIC minus the unstable one's; demanded when the margin
    exceeds :data:`CLOSE_CALL` ("very strong" evidence, Kass & Raftery 1995).
    A margin at or below zero means the stable fit is as good or better.
    """
    margin = result_bic(stable) - result_bic(unstable)
    return bool(margin > CLOSE_CALL), float(margin)
