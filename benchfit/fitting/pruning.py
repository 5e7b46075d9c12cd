"""Pruning a refined hypothesis: groups the data do not need are tried for removal.

Each loop here proposes a smaller model (groups above the band, a delay in
place of lagging zeros, nearly cancelling pole/zero groups, groups the data
cannot locate), refines it briefly, and keeps it only when
:func:`benchfit.fitting.selection.drop_allowed` says the data allow it.
"""

from __future__ import annotations

import numpy as np

from benchfit.fitting.assemble import LOOSE
from benchfit.fitting.delay import DELAY_MIN_PHASE
from benchfit.fitting.groups import (
    RHP_NEAR_TOP,
    below_noise,
    cancelling,
    dropped_phase_as_delay,
    groups_above,
    narrower_than_spacing,
    unidentified,
    with_delay,
    with_pole,
    without,
)
from benchfit.fitting.parameters import TWO_PI, Structure
from benchfit.fitting.problem import Problem
from benchfit.fitting.refine import Refined
from benchfit.fitting.selection import above_band_trials, drop_allowed, noise_scale, prunable
from benchfit.fitting.weights import PointSigma

#: Evaluations a pruning trial gets: a group the data do not need leaves the rest
#: next to its optimum (5..10 evaluations); one they need stays far above the bar.
TRIAL_NFEV = 20
#: Evaluations a pruned hypothesis gets before it is judged against the others (one
#: still within reach of the best is then refined to convergence).
PRUNED_NFEV = 60


def trial(refit, st: Structure, values: np.ndarray, ref: Refined, bar: float) -> Refined:
    """A pruning trial's refinement: :data:`TRIAL_NFEV` evaluations, as many again when
    it stopped at the cap within twice the ``bar`` (χ² rise in units of the reduced
    χ² of ``ref``) of passing."""
    ref2 = refit(st, values, max_nfev=TRIAL_NFEV)
    if not ref2.success and (ref2.chisqr - ref.chisqr) / noise_scale(ref) <= 2.0 * bar:
        ref2 = refit(st, ref2.values, max_nfev=TRIAL_NFEV)
    return ref2


def delay_trial(st: Structure, values: np.ndarray, f_max: float, w: np.ndarray,
                 **kinds: bool) -> tuple[list[str], float] | None:
    """Groups a delay could stand in for in a model without one, and that delay.

    The groups are the poles and zeros above the band and the right-half-plane
    zeros near its top (:func:`groups_above`); the delay is the one whose
    phase matches theirs (:func:`dropped_phase_as_delay`).  None when there
    are none or their phase is not a lag worth a delay parameter.
    """
    groups = [g for g, _ in groups_above(st, values, f_max, rhp_from=RHP_NEAR_TOP * f_max,
                                               **kinds)]
    if not groups:
        return None
    tau = dropped_phase_as_delay(st, values, groups, w)
    return (groups, tau) if tau * float(w[-1]) >= DELAY_MIN_PHASE else None


def pole_trial(st: Structure, values: np.ndarray, f_max: float, poles: bool = True,
               zeros: bool = True) -> tuple[list[str], float] | None:
    """Lagging zeros near and above the top of the band that one real pole could stand in
    for, and that pole's frequency (Hz).

    A pole just above the band lags the phase like a right-half-plane zero at the
    same frequency; vector fitting sometimes finds the zero (with a zero pair
    above the band bending the magnitude back) and parks its spare pole far
    away, where no refinement walks it back from.  The groups are the zeros
    above the band and the right-half-plane zeros above a third of f_max
    (:func:`groups_above`); the pole starts at the lowest such right-half-plane
    zero.  None without one, or when poles or zeros may not change.
    """
    if not (poles and zeros):
        return None
    v = dict(zip(st.names, values, strict=True))
    groups = groups_above(st, values, f_max, rhp_from=RHP_NEAR_TOP * f_max, poles=False)
    rhp = [fr for g, fr in groups if not g.startswith("zero_pair") and v[f"{g}_hz"] < 0]
    return ([g for g, _ in groups], min(rhp)) if rhp else None


def prune_above(st: Structure, ref: Refined, refit, f_max: float, n_res: int,
                 w: np.ndarray | None = None, delay_free: bool = False, add_delay: bool = False,
                 predict=None, **kinds: bool) -> tuple[Structure, Refined, int]:
    """Drop zeros (and poles) above the band that the data do not need.

    A group is dropped when the rise of chi-square, in units of the reduced
    chi-square, stays under Schwarz's penalty ln N per parameter dropped (the
    same criterion that chooses delay or no delay, :func:`bic`).  Above the
    band a zero's phase, −ω/ω_z, is a delay's phase, so a plain 95 %
    likelihood-ratio test (penalty 3.8 per parameter) let noise buy a spurious
    zero that stole part of the delay and shrank its error bar.  All groups
    are tried at once first, then one at a time (highest frequency first).
    With ``delay_free`` (a fitted delay) the delay takes over the dropped
    zeros' phase over ``w`` (rad/s), see :func:`dropped_phase_as_delay`.
    With ``add_delay`` a model without a delay is offered one in place of
    its lagging zeros near and above the top of the band when dropping all
    zeros above the band fails (:func:`delay_trial`): a short delay, a
    radian or two at the top of the band, is otherwise fitted as a cluster
    of such zeros (one parameter fewer per zero dropped, one more for the
    delay).  Poles above the band are tried like zeros (``kinds``: ``poles`` and
    ``zeros`` flags of :func:`groups_above`).  Trials, the first that passes
    wins: every group at once, the delay swap, a pole in place of lagging zeros
    (:func:`pole_trial`), the zeros alone, the poles
    alone, then each group (highest first).  ``predict``: as for
    :func:`drop_unneeded`, a plain drop of groups that all lie above the band
    (no swap, no right-half-plane zero inside it) that :func:`hopeless` rules
    out is not refined: on the noisy 8-pole benchmark plant the delay
    hypothesis one order up had five such trials, χ² rises of 650 to 17 000
    against bars of 12 to 31, a third of the automatic fit.
    """
    penalty = float(np.log(n_res))
    dropped = 0
    while True:
        groups = groups_above(st, ref.values, f_max, rhp_from=(
            RHP_NEAR_TOP * f_max if delay_free and st.delay else None), **kinds)
        if not np.isfinite(ref.redchi) or ref.redchi <= 0:
            return st, ref, dropped
        groups.sort(key=lambda g: -g[1])
        above = {g for g, fr in groups if fr > f_max}
        trials: list[tuple[list[str], float | None, float | None]] = []
        if groups:
            trials.append(([g for g, _ in groups], None, None))
        # The swap comes after plain dropping: a delay only when the zeros are needed.
        swap = delay_trial(st, ref.values, f_max, w, **kinds) if (
            add_delay and not st.delay and w is not None) else None
        if swap is not None:
            trials.append((*swap, None))
        as_pole = pole_trial(st, ref.values, f_max, **kinds)
        if as_pole is not None:
            trials.append((as_pole[0], None, as_pole[1]))
        if len(groups) > 1:
            # The zeros alone, then the poles alone, before single groups: dropped one at
            # a time from the top, a pole above the band went first and the zeros left
            # behind rearranged to mimic it (a right-half-plane zero beside an undamped
            # zero pair, two parameters more than the pole).
            zs = [g for g, _ in groups if g.startswith("zero")]
            ps = [g for g, _ in groups if not g.startswith("zero")]
            if zs and ps:
                trials += [(zs, None, None), (ps, None, None)]
            trials += [([g], None, None) for g, _ in groups]
        for drop, tau, pole_hz in trials:
            st2, v2 = without(st, ref.values, drop)
            if tau is not None:
                st2, v2 = with_delay(st2, v2, tau)
            if pole_hz is not None:
                st2, v2 = with_pole(st2, v2, pole_hz)
            elif delay_free and st2.delay and w is not None:
                v2 = v2.copy()
                v2[-1] += dropped_phase_as_delay(st, ref.values, drop, w)
            dp = len(st.names) - len(st2.names)
            if (predict is not None and tau is None and pole_hz is None
                    and above.issuperset(drop) and hopeless(ref, predict(st2, v2), dp, n_res)):
                continue
            ref2 = trial(refit, st2, v2, ref, penalty * dp)
            if drop_allowed(ref, ref2, dp, n_res):
                st, ref = st2, ref2
                dropped += len(drop)
                break
        else:
            return st, ref, dropped


#: A trial is skipped when even its linearised outcome raises χ² by more than this many
#: times the drop test's bar (see :func:`hopeless`).
HOPELESS = 10.0


def hopeless(kept: Refined, predicted_chisqr: float, n_params: int, n_res: int) -> bool:
    """True when a drop trial cannot pass the information criterion, judged without
    refining it.

    Evidence weighed: ``predicted_chisqr``, the smaller model's χ² after one
    Gauss–Newton step from its start (the kept model's values without the
    dropped groups; :meth:`benchfit.fitting.problem.Problem.linearised`),
    against the bar of :func:`~benchfit.fitting.selection.ic_allows` (ln N per
    parameter removed, in units of ``kept``'s noise scale,
    :func:`~benchfit.fitting.selection.noise_scale`) raised
    :data:`HOPELESS` times.  The linearised step is a guess of the trial's
    outcome, not a bound: on the trials of ``benchmarks/fit_vs_reference.py``'s
    fixed-order cases (2026-12-03) it matched the refined trial to 2 % where the
    drop was cheap, and lay below it (by 1.2× to 1e10× in the χ² rise) where it
    was dear; for a needed zero at twice the top of a two-pole plant's band it
    was 14 % above scipy's refined optimum (tests/test_fit_refine_stops.py).  A
    trial is skipped only when the guess is over ten times the bar, so a guess
    wrong by less than that factor skips no trial that could pass.  NaN (a
    start that does not evaluate) is not hopeless.  Only the trials of groups
    above the band ask it (:func:`prune_loose`): there a group's log response
    is nearly linear in its inverse frequency.  A group the data cannot locate,
    or one of a cancelling pair, can leave the others to move far: order 3 on
    the two-pole plant of tests/test_fit_model_choice.py put a zero at 25 Hz
    (σ 48 Hz) beside a pole; the guess for dropping it was over ten bars,
    the refined trial passed with the pole moved to 3.6e11 Hz.
    """
    if not (np.isfinite(kept.redchi) and np.isfinite(predicted_chisqr)):
        return False
    rise = (predicted_chisqr - kept.chisqr) / noise_scale(kept)
    return bool(rise > HOPELESS * np.log(n_res) * n_params)


def drop_unneeded(st: Structure, ref: Refined, refit, n_res: int, candidates, waive=None,
                  predict=None) -> tuple[Structure, Refined, int]:
    """Greedy pruning: drop the first of ``candidates(st, ref)`` (lists of groups) the data
    do not need, by the ln N rule of :func:`prune_above` (or outright when
    ``waive(st, ref, groups)``), and look again until none goes.

    ``predict(st, values)``: the linearised χ² of a trial's start
    (:meth:`benchfit.fitting.problem.Problem.linearised`); a trial that is not
    waived and that :func:`hopeless` rules out is not refined.

    Returns the structure, its refinement and the number of drops.
    """
    penalty = float(np.log(n_res))
    dropped = 0
    while np.isfinite(ref.redchi) and ref.redchi > 0:
        for drop in candidates(st, ref):
            st2, v2 = without(st, ref.values, drop)
            dp = len(st.names) - len(st2.names)
            waived = waive is not None and waive(st, ref, drop)
            if not waived and predict is not None and hopeless(ref, predict(st2, v2), dp, n_res):
                continue
            ref2 = trial(refit, st2, v2, ref, penalty * dp)
            if drop_allowed(ref, ref2, dp, n_res, waived=waived):
                st, ref = st2, ref2
                dropped += 1
                break
        else:
            break
    return st, ref, dropped


def prune_cancelling(st: Structure, ref: Refined, refit, n_res: int, freq_hz: np.ndarray,
                      sigma: PointSigma) -> tuple[Structure, Refined, int]:
    """Drop pole/zero groups that nearly cancel when the data do not need them.

    Inside the band such a pair (often with Q in the hundreds) fits a noise
    spike, not the plant.  It is dropped outright when its bandwidth is under
    the point spacing (:func:`narrower_than_spacing`) or its effect is under
    the noise at every point (:func:`below_noise`: its frequency is free, so
    it can go looking for the luckiest run of noise, which a per-parameter
    penalty does not price), otherwise by the rule of :func:`prune_above`:
    unless χ² rises by more than ln N per parameter removed (Schwarz 1978).
    ``freq_hz`` and ``sigma`` are those of the full sweep.
    """
    def waive(st_: Structure, ref_: Refined, drop: list[str]) -> bool:
        return (all(narrower_than_spacing(st_, ref_.values, g, freq_hz) for g in drop)
                or below_noise(st_, ref_.values, drop, freq_hz, sigma))

    return drop_unneeded(st, ref, refit, n_res, lambda st_, ref_: cancelling(st_, ref_.values),
                          waive)


def prune_unidentified(st: Structure, ref: Refined, refit, n_res: int, poles: bool = True,
                       zeros: bool = True) -> tuple[Structure, Refined, int]:
    """Drop pole or zero groups the data cannot locate (σ above the value), one at a
    time, by the ln N rule of :func:`prune_above`.

    A spare pole the refinement parks somewhere the data say nothing about (a
    second real pole beside an overdamped pair, a pair far past the band)
    shows as an error bar larger than the value itself.
    """
    def kind_ok(g: str) -> bool:
        return zeros if g.startswith("zero") else poles

    return drop_unneeded(st, ref, refit, n_res,
                         lambda st_, ref_: [[g] for g in unidentified(st_, ref_) if kind_ok(g)])


def loose_above(st: Structure, ref: Refined, f_max: float, poles: bool = True,
                zeros: bool = True) -> list[str]:
    """Groups above the band that the data locate only loosely: a frequency (or Q)
    whose σ exceeds :data:`~benchfit.fitting.assemble.LOOSE` of its value, or that is
    not determined; highest first."""
    out = []
    for g, _ in sorted(groups_above(st, ref.values, f_max, poles=poles, zeros=zeros),
                       key=lambda x: -x[1]):
        keys = [f"{g}_f0_hz", f"{g}_q"] if g.startswith(("pair", "zero_pair")) else [f"{g}_hz"]
        for k in keys:
            i = st.names.index(k)
            sd = ref.stderr[i]
            if k in ref.undetermined or (np.isfinite(sd) and sd > LOOSE * abs(ref.values[i])):
                out.append(g)
                break
    return out


def prune_loose(st: Structure, ref: Refined, refit, f_max: float, n_res: int, poles: bool = True,
                zeros: bool = True, predict=None) -> tuple[Structure, Refined, int]:
    """The trials of :func:`prune_above` when the user gave the order (see
    :func:`benchfit.fitting.selection.above_band_trials`): every group above the
    band at once, then each one the data locate only loosely (:func:`loose_above`),
    highest first; a drop goes when :func:`benchfit.fitting.selection.drop_allowed`
    allows it.

    The joint trial stays because spare zeros above the band go together or not
    at all: on the noiseless 8-pole benchmark plant three of them (five
    parameters) passed only together.  A group alone is tried only when loosely
    located: one located to better than :data:`~benchfit.fitting.assemble.LOOSE`
    of its value has a linearised drop cost, (f/σ)², over 25, four times the drop
    test's bar (ln N at N = 400 residuals), and stays.  ``predict``: as for
    :func:`drop_unneeded`, a trial :func:`hopeless` rules out is not refined.
    """
    def candidates(st_: Structure, ref_: Refined) -> list[list[str]]:
        every = [g for g, _ in groups_above(st_, ref_.values, f_max, poles=poles, zeros=zeros)]
        loose = loose_above(st_, ref_, f_max, poles=poles, zeros=zeros)
        return ([every] if every else []) + [[g] for g in loose if [g] != every]

    return drop_unneeded(st, ref, refit, n_res, candidates, predict=predict)


def cancel_note(n: int) -> str:
    """The note for ``n`` dropped cancelling groups."""
    return f"dropped {n} nearly cancelling pole/zero group(s) that the data do not need"


def pruned(pb: Problem, hyp_st: Structure, ref: Refined, notes: list[str], idx: np.ndarray,
           refit, trial=None, final_nfev: int | None = None
           ) -> tuple[Structure, Refined, list[str]]:
    """A started hypothesis (:func:`~benchfit.fitting.hypotheses.start`) with the groups
    the data do not need pruned.

    Only groups of the kinds :func:`~benchfit.fitting.selection.prunable` allows
    are tried (never a pole when the user gave the order, never a kind the user
    holds or bounds).  ``refit`` refines on the points ``idx`` (``trial``, the
    pruning trials, when given).  A pruned or capped outcome is refined again
    with ``final_nfev`` evaluations (the hypothesis is the only one: this is
    its refinement to the end), or with :data:`PRUNED_NFEV` when None.
    """
    st = hyp_st
    f = pb.f
    trial = trial or refit
    notes = list(notes)
    n_res = 2 * idx.shape[0]
    n_drop = 0
    may = prunable(pb)
    kinds = {"poles": may["poles"], "zeros": may["zeros"]}
    predict = pb.linearised(idx)
    if (kinds["poles"] or kinds["zeros"]) and not above_band_trials(pb):
        st, ref, n_drop = prune_loose(st, ref, trial, f[-1], n_res, predict=predict, **kinds)
        if n_drop:
            notes.append(f"dropped {n_drop} pole or zero group(s) above the band that the data "
                         "do not need")
    elif kinds["poles"] or kinds["zeros"]:
        had_delay = st.delay
        st, ref, n_drop = prune_above(st, ref, trial, f[-1], n_res, TWO_PI * f[idx],
                                      delay_free="delay_s" not in pb.fixed,
                                      add_delay=pb.may_add_delay, predict=predict, **kinds)
        if st.delay and not had_delay:
            notes.append("a delay fits the phase lag that poles or zeros near and above the "
                         "top of the band had taken")
        if n_drop:
            where = "above or, with a delay, near the top of" if st.delay else "above"
            notes.append(f"dropped {n_drop} pole or zero group(s) {where} the band that the data "
                         "do not need")
    if may["cancelling"]:
        # The point spacing that matters is the full sweep's, not the thinned copy's.
        st, ref, n_cancel = prune_cancelling(st, ref, trial, n_res, f, pb.sigma)
        if n_cancel:
            notes.append(cancel_note(n_cancel))
            n_drop += n_cancel
    if kinds["poles"] or kinds["zeros"]:
        st, ref, n_vague = prune_unidentified(st, ref, trial, n_res, **kinds)
        if n_vague:
            notes.append(f"dropped {n_vague} pole or zero group(s) whose frequency the data "
                         "could not pin (σ above the value) and do not need")
            n_drop += n_vague
    if not ref.success or n_drop:
        # The capped runs above may have stopped short.  Capped again unless this is
        # the only hypothesis: only one still in the running is refined to the end
        # (see race()).
        ref = refit(st, ref.values, max_nfev=final_nfev or PRUNED_NFEV)
    return st, ref, notes
