"""``fit()``: from a measured FrequencyResponse to a FitResult.

Steps: band selection → per-point σ (weights.py) → delay estimate (delay.py)
→ vector fitting at a given or automatically chosen order (vectfit.py,
order.py) → physical parameters (parameters.py) with spurious zeros and
cancelling artefacts removed → lmfit refinement with uncertainties
(refine.py) → statistics and warnings (result.py).
"""

from __future__ import annotations

from dataclasses import replace
from typing import Any

import numpy as np

from benchfit.data.response import FrequencyResponse
from benchfit.errors import FitError, InputError
from benchfit.fitting.delay import (
    choose_delay_order,
    delay_stepper,
    excess_phase_delay,
    refine_delay,
)
from benchfit.fitting.model import PlantModel
from benchfit.fitting.order import (
    CHI_OK,
    NEGLIGIBLE,
    Attempt,
    Context,
    attempt,
    choose_order,
    max_order,
    polish,
)
from benchfit.fitting.parameters import TWO_PI, Structure, from_zpk, response, to_zpk
from benchfit.fitting.refine import Refined, log_residual, refine, renumbered
from benchfit.fitting.result import FitResult, Parameter
from benchfit.fitting.uncertainty import correlation
from benchfit.fitting.vectfit import vf_to_zpk
from benchfit.fitting.weights import PointSigma, point_sigma, scatter_sigma, vf_weight

#: Zeros beyond this multiple of the top frequency are dropped (not identifiable in band).
ZERO_LIMIT = 3.0
#: With a fitted delay, right-half-plane zeros above this fraction of the top frequency
#: are tested for dropping like zeros above the band (see _groups_above).
RHP_NEAR_TOP = 1.0 / 3.0
#: Evaluations a pruning trial gets: a group the data do not need leaves the rest
#: next to its optimum (5..10 evaluations); one they need stays far above the bar.
TRIAL_NFEV = 20
#: A delay whose phase at f_max is below this (rad) is not worth a parameter.
DELAY_MIN_PHASE = 0.05
#: Residual above this multiple of the noise floor gets a warning (common practice, no source).
FAR_ABOVE_FLOOR = 2.0
#: A fit with mirrored poles whose residual stays above this multiple of the floor loses
#: to the unmirrored one that reaches the floor (see fit(); common practice, no source).
UNSTABLE_RETRY = 1.3
_DB = 20.0 / np.log(10.0)


def _check_options(order, delay, weighting, integrators) -> None:
    if not (order == "auto" or (isinstance(order, (int, np.integer)) and not isinstance(order, bool)
                                and order >= 1)):
        raise InputError(f"{order!r}: expected 'auto' or a whole number >= 1", source="--order")
    if isinstance(delay, str):
        if delay not in ("auto", "none"):
            raise InputError(f"{delay!r}: expected auto, none or a delay in seconds", source="--delay")
    elif not (isinstance(delay, (int, float)) and np.isfinite(delay) and delay >= 0):
        raise InputError(f"{delay!r}: expected auto, none or a delay >= 0 s", source="--delay")
    if weighting not in ("relative", "absolute"):
        raise InputError(f"{weighting!r}: expected relative or absolute", source="--weighting")
    if not (integrators == "auto" or (isinstance(integrators, (int, np.integer))
                                      and 0 <= integrators <= 3)):
        raise InputError(f"{integrators!r}: expected auto or 0..3", source="--integrators")


def _slope(f: np.ndarray, mag: np.ndarray, part: slice) -> float:
    """Median log-log slope of |H| (decades of |H| per decade of f) over ``part``."""
    g = np.gradient(np.log(mag), np.log(f))[part]
    return float(np.median(g)) if g.size else 0.0


def detect_integrators(f: np.ndarray, h: np.ndarray) -> int:
    """Integrators seen at the bottom of the band: slope −m and phase −90°·m (common practice)."""
    n = f.shape[0]
    part = slice(0, max(3, n // 20))
    m = int(round(-_slope(f, np.abs(h), part)))
    if m <= 0:
        return 0
    ph = np.degrees(np.angle(h[part]))
    # phase of gain/s^m: −90·m (or +180 offset for an inverting gain)
    err = np.abs(((ph + 90.0 * m) + 90.0) % 180.0 - 90.0)
    return min(m, 3) if float(np.median(err)) < 20.0 else 0


def _clean_zpk(zeros, poles, k, f_min, f_max) -> tuple[np.ndarray, np.ndarray, float, list[str]]:
    """Drop zeros and poles far above the band and pole/zero pairs that cancel below it.

    The gain k is adjusted so the response in the band is unchanged to first
    order: a dropped zero z contributes (s − z) ≈ −z there (a pole likewise).
    """
    notes = []
    w_max = TWO_PI * f_max
    for what, roots in (("zero", zeros), ("pole", poles)):
        far = np.abs(roots) > ZERO_LIMIT * w_max
        if np.any(far):
            notes.append(f"dropped {int(far.sum())} {what}(s) above {ZERO_LIMIT:g}× the top "
                         "frequency (not identifiable in the band)")
            fac = np.prod(-roots[far])
            k = float(np.real(k * fac if what == "zero" else k / fac))
        if what == "zero":
            zeros = zeros[~far]
        else:
            poles = poles[~far]
    # A pole and a zero closer than 1 % of their frequency, outside the band, are a VF artefact.
    keep_p = np.ones(poles.shape[0], bool)
    keep_z = np.ones(zeros.shape[0], bool)
    w_min = TWO_PI * f_min
    for i, p in enumerate(poles):
        if w_min <= abs(p) <= w_max:
            continue
        d = np.abs(zeros - p)
        d[~keep_z] = np.inf
        j = int(np.argmin(d)) if d.size else -1
        if j >= 0 and d[j] < 0.01 * abs(p):
            keep_p[i] = keep_z[j] = False
    removed = int((~keep_p).sum())
    if removed:
        notes.append(f"removed {removed} pole/zero pair(s) cancelling outside the band")
    k = float(np.real(k * np.prod(-zeros[~keep_z]) / np.prod(-poles[~keep_p])))
    return zeros[keep_z], poles[keep_p], k, notes


def _in_groups(name: str, groups: list[str]) -> bool:
    """True if parameter ``name`` belongs to one of ``groups`` (``zero3``, ``pair2``...)."""
    return name.rsplit("_", 1)[0] in groups or any(name.startswith(g + "_") for g in groups)


def _without(st: Structure, values: np.ndarray, drop: list[str]) -> tuple[Structure, np.ndarray]:
    """Structure and values with the named zero groups (``zero3`` or ``zero_pair1``) removed."""
    names = st.names
    keep = [i for i, nm in enumerate(names) if not _in_groups(nm, drop)]
    kept = tuple(names[i] for i in keep)
    st2 = Structure.from_names(kept, st.integrators)
    return st2, np.asarray(values)[keep]


def _dropped_phase_as_delay(st: Structure, values: np.ndarray, drop: list[str],
                            w: np.ndarray) -> float:
    """The delay (s) whose phase −ωτ best matches, over ``w`` (rad/s), the phase of
    the pole and zero groups ``drop``.

    Above the band a zero's or a pole's phase is nearly linear in ω, a delay's
    phase; so when the pruning drops such groups from a model with a delay,
    the delay takes over their phase and the refinement starts next to its
    optimum rather than a wrapped phase away from it.
    """
    v = dict(zip(st.names, values, strict=True))
    phase = np.zeros_like(w)
    for g in drop:
        sign = -1.0 if g.startswith(("pole", "pair")) else 1.0
        if g.startswith(("zero_pair", "pair")):
            w0, q = TWO_PI * v[f"{g}_f0_hz"], v[f"{g}_q"]
            phase += sign * np.unwrap(np.arctan2(w / (w0 * q), 1.0 - (w / w0) ** 2))
        else:
            phase += sign * np.arctan(w / (TWO_PI * v[f"{g}_hz"]))
    return float(-np.dot(w, phase) / np.dot(w, w))


def _groups_above(st: Structure, values: np.ndarray, f_max: float,
                       rhp_from: float | None = None, poles: bool = True, zeros: bool = True
                       ) -> list[tuple[str, float]]:
    """(group, |frequency|) of zeros and poles above the band, e.g. ("zero2", 3e7),
    ("zero_pair1", 2e7), ("pole3", 5e7).

    With ``rhp_from`` (Hz), right-half-plane zeros above that frequency are
    listed too: with a delay in the model they are the delay's look-alikes
    (phase lag growing with frequency) and must earn their place the same way.
    A pole above the band is one as well (its lag, −ω/ω_p, is a delay's):
    the refinement can push a spare in-band pole there instead of the delay.
    ``poles=False`` (``zeros=False``) leaves the poles (zeros) out: the user
    holds or bounds one, and its name must not shift.
    """
    v = dict(zip(st.names, values, strict=True))
    out = []
    for nm, x in v.items():
        if nm.startswith("zero") and not zeros:
            continue
        if nm.startswith("zero_pair") and nm.endswith("_f0_hz"):
            g = nm[: -len("_f0_hz")]
            rhp = v[f"{g}_q"] < 0
        elif nm.startswith("zero") and not nm.startswith("zero_pair"):
            g = nm[: -len("_hz")]
            rhp = x < 0
        elif poles and nm.startswith("pair") and nm.endswith("_f0_hz"):
            g, rhp = nm[: -len("_f0_hz")], False
        elif poles and nm.startswith("pole"):
            g, rhp = nm[: -len("_hz")], False
        else:
            continue
        if abs(x) > f_max or (rhp_from is not None and rhp and abs(x) > rhp_from):
            out.append((g, abs(x)))
    return out


def _trial(refit, st: Structure, values: np.ndarray, ref: Refined, bar: float) -> Refined:
    """A pruning trial's refinement: :data:`TRIAL_NFEV` evaluations, as many again when
    it stopped at the cap within twice the ``bar`` (χ² rise in units of the reduced
    χ² of ``ref``) of passing."""
    ref2 = refit(st, values, max_nfev=TRIAL_NFEV)
    if not ref2.success and (ref2.chisqr - ref.chisqr) / ref.redchi <= 2.0 * bar:
        ref2 = refit(st, ref2.values, max_nfev=TRIAL_NFEV)
    return ref2


def _with_delay(st: Structure, values: np.ndarray, tau: float) -> tuple[Structure, np.ndarray]:
    """Structure and values with a delay parameter (``tau`` seconds) appended."""
    st2 = Structure(st.real_poles, st.pole_pairs, st.real_zeros, st.zero_pairs,
                    st.integrators, True)
    return st2, np.append(values, tau)


def _delay_trial(st: Structure, values: np.ndarray, f_max: float, w: np.ndarray,
                 **kinds: bool) -> tuple[list[str], float] | None:
    """Groups a delay could stand in for in a model without one, and that delay.

    The groups are the poles and zeros above the band and the right-half-plane
    zeros near its top (:func:`_groups_above`); the delay is the one whose
    phase matches theirs (:func:`_dropped_phase_as_delay`).  None when there
    are none or their phase is not a lag worth a delay parameter.
    """
    groups = [g for g, _ in _groups_above(st, values, f_max, rhp_from=RHP_NEAR_TOP * f_max,
                                               **kinds)]
    if not groups:
        return None
    tau = _dropped_phase_as_delay(st, values, groups, w)
    return (groups, tau) if tau * float(w[-1]) >= DELAY_MIN_PHASE else None


def _prune_above(st: Structure, ref: Refined, refit, f_max: float, n_res: int,
                 w: np.ndarray | None = None, delay_free: bool = False, add_delay: bool = False,
                 **kinds: bool) -> tuple[Structure, Refined, int]:
    """Drop zeros (and poles) above the band that the data do not need.

    A group is dropped when the rise of chi-square, in units of the reduced
    chi-square, stays under Schwarz's penalty ln N per parameter dropped (the
    same criterion that chooses delay or no delay, :func:`_bic`).  Above the
    band a zero's phase, −ω/ω_z, is a delay's phase, so a plain 95 %
    likelihood-ratio test (penalty 3.8 per parameter) let noise buy a spurious
    zero that stole part of the delay and shrank its error bar.  All groups
    are tried at once first, then one at a time (highest frequency first).
    With ``delay_free`` (a fitted delay) the delay takes over the dropped
    zeros' phase over ``w`` (rad/s), see :func:`_dropped_phase_as_delay`.
    With ``add_delay`` a model without a delay is offered one in place of
    its lagging zeros near and above the top of the band when dropping all
    zeros above the band fails (:func:`_delay_trial`): a short delay, a
    radian or two at the top of the band, is otherwise fitted as a cluster
    of such zeros (one parameter fewer per zero dropped, one more for the
    delay).  Poles above the band are tried like zeros (``kinds``: ``poles`` and
    ``zeros`` flags of :func:`_groups_above`).
    """
    penalty = float(np.log(n_res))
    dropped = 0
    while True:
        groups = _groups_above(st, ref.values, f_max, rhp_from=(
            RHP_NEAR_TOP * f_max if delay_free and st.delay else None), **kinds)
        if not np.isfinite(ref.redchi) or ref.redchi <= 0:
            return st, ref, dropped
        groups.sort(key=lambda g: -g[1])
        trials: list[tuple[list[str], float | None]] = []
        if groups:
            trials.append(([g for g, _ in groups], None))
        # The swap comes after plain dropping: a delay only when the zeros are needed.
        swap = _delay_trial(st, ref.values, f_max, w, **kinds) if (
            add_delay and not st.delay and w is not None) else None
        if swap is not None:
            trials.append(swap)
        if len(groups) > 1:
            trials += [([g], None) for g, _ in groups]
        for drop, tau in trials:
            st2, v2 = _without(st, ref.values, drop)
            if tau is not None:
                st2, v2 = _with_delay(st2, v2, tau)
            elif delay_free and st2.delay and w is not None:
                v2 = v2.copy()
                v2[-1] += _dropped_phase_as_delay(st, ref.values, drop, w)
            dp = len(st.names) - len(st2.names)
            ref2 = _trial(refit, st2, v2, ref, penalty * dp)
            if (ref2.chisqr - ref.chisqr) / ref.redchi <= penalty * dp:
                st, ref = st2, ref2
                dropped += len(drop)
                break
        else:
            return st, ref, dropped


#: A pole and a zero (or two pairs) closer than this fraction of their frequency nearly cancel.
CANCEL = 0.01


def _cancelling(st: Structure, values: np.ndarray) -> list[list[str]]:
    """Pole/zero groups that nearly cancel, e.g. [["pair4", "zero_pair1"]], closest first.

    Real poles are matched with real zeros of the same sign, pairs with zero pairs.
    """
    v = dict(zip(st.names, values, strict=True))
    out = []
    for p_kind, z_kind, key in (("pole", "zero", "_hz"), ("pair", "zero_pair", "_f0_hz")):
        n_p = st.real_poles if p_kind == "pole" else st.pole_pairs
        n_z = st.real_zeros if z_kind == "zero" else st.zero_pairs
        for i in range(1, n_p + 1):
            fp = v[f"{p_kind}{i}{key}"]
            for j in range(1, n_z + 1):
                fz = v[f"{z_kind}{j}{key}"]
                d = abs(fp - fz) / abs(fp)
                if d < CANCEL:
                    out.append((d, [f"{p_kind}{i}", f"{z_kind}{j}"]))
    return [g for _, g in sorted(out, key=lambda x: x[0])]


def _narrower_than_spacing(st: Structure, values: np.ndarray, group: str,
                           freq_hz: np.ndarray) -> bool:
    """True if the pair ``group``'s bandwidth f0/|Q| is under the point spacing at f0.

    Such a feature lives between two points (or on one): the sweep cannot
    identify it, it can only fit that point's noise.
    """
    if not group.startswith(("pair", "zero_pair")):
        return False
    v = dict(zip(st.names, values, strict=True))
    f0, q = abs(v[f"{group}_f0_hz"]), abs(v[f"{group}_q"])
    spacing = float(np.interp(f0, freq_hz, np.gradient(freq_hz)))
    return f0 / max(q, 1e-300) < spacing


def _below_noise(st: Structure, values: np.ndarray, groups: list[str], freq_hz: np.ndarray,
                 sigma: PointSigma) -> bool:
    """True if the groups together change the response by less than one σ at every point.

    Such a near-cancelling doublet is invisible point by point; whatever χ² it
    buys comes from lining up with a run of noise, and a loop design cannot
    see it either.
    """
    names = ("gain",) + tuple(nm for nm in st.names if _in_groups(nm, groups))
    v = dict(zip(st.names, values, strict=True), gain=1.0)
    st2 = Structure.from_names(names, 0)
    with np.errstate(all="ignore"):
        d = np.log(response(st2, np.array([v[nm] for nm in names]), 1j * TWO_PI * freq_hz))
    e = np.hypot(d.real / sigma.mag, d.imag / sigma.phase)
    return bool(np.all(np.isfinite(e)) and np.max(e) < 1.0)


def _prune_cancelling(st: Structure, ref: Refined, refit, n_res: int, freq_hz: np.ndarray,
                      sigma: PointSigma) -> tuple[Structure, Refined, int]:
    """Drop pole/zero groups that nearly cancel when the data do not need them.

    Inside the band such a pair (often with Q in the hundreds) fits a noise
    spike, not the plant.  It is dropped outright when its bandwidth is under
    the point spacing (:func:`_narrower_than_spacing`) or its effect is under
    the noise at every point (:func:`_below_noise`: its frequency is free, so
    it can go looking for the luckiest run of noise, which a per-parameter
    penalty does not price), otherwise by the rule of :func:`_prune_above`:
    unless χ² rises by more than ln N per parameter removed (Schwarz 1978).
    ``freq_hz`` and ``sigma`` are those of the full sweep.
    """
    def waive(st_: Structure, ref_: Refined, drop: list[str]) -> bool:
        return (all(_narrower_than_spacing(st_, ref_.values, g, freq_hz) for g in drop)
                or _below_noise(st_, ref_.values, drop, freq_hz, sigma))

    return _drop_unneeded(st, ref, refit, n_res, lambda st_, ref_: _cancelling(st_, ref_.values),
                          waive)


def _drop_unneeded(st: Structure, ref: Refined, refit, n_res: int, candidates, waive=None
                   ) -> tuple[Structure, Refined, int]:
    """Greedy pruning: drop the first of ``candidates(st, ref)`` (lists of groups) the data
    do not need, by the ln N rule of :func:`_prune_above` (or outright when
    ``waive(st, ref, groups)``), and look again until none goes.

    Returns the structure, its refinement and the number of drops.
    """
    penalty = float(np.log(n_res))
    dropped = 0
    while np.isfinite(ref.redchi) and ref.redchi > 0:
        for drop in candidates(st, ref):
            st2, v2 = _without(st, ref.values, drop)
            dp = len(st.names) - len(st2.names)
            ref2 = _trial(refit, st2, v2, ref, penalty * dp)
            if (waive is not None and waive(st, ref, drop)) or \
                    (ref2.chisqr - ref.chisqr) / ref.redchi <= penalty * dp:
                st, ref = st2, ref2
                dropped += 1
                break
        else:
            break
    return st, ref, dropped


def _unidentified(st: Structure, ref: Refined) -> list[str]:
    """Pole and zero groups with a parameter whose σ exceeds its value or that the data
    cannot determine at all (:attr:`Refined.undetermined`), vaguest first."""
    out = []
    for i, nm in enumerate(st.names):
        if not nm.startswith(("pole", "pair", "zero")):
            continue
        rel = abs(ref.stderr[i] / ref.values[i]) if ref.values[i] else np.inf
        if nm in ref.undetermined:
            rel = np.inf  # the data cannot determine it at all: vaguer than any σ
        elif not np.isfinite(rel):
            continue
        if rel > 1.0:
            out.append((rel, nm[: -len("_f0_hz")] if nm.endswith("_f0_hz") else nm.rsplit("_", 1)[0]))
    seen: dict[str, float] = {}
    for rel, g in out:
        seen[g] = max(rel, seen.get(g, 0.0))
    return sorted(seen, key=lambda g: -seen[g])


def _prune_unidentified(st: Structure, ref: Refined, refit, n_res: int
                        ) -> tuple[Structure, Refined, int]:
    """Drop pole or zero groups the data cannot locate (σ above the value), one at a
    time, by the ln N rule of :func:`_prune_above`.

    A spare pole the refinement parks somewhere the data say nothing about (a
    second real pole beside an overdamped pair, a pair far past the band)
    shows as an error bar larger than the value itself.
    """
    return _drop_unneeded(st, ref, refit, n_res,
                          lambda st_, ref_: [[g] for g in _unidentified(st_, ref_)])


def _hf_terms(f: np.ndarray, h: np.ndarray, integrators: int) -> tuple[bool, bool]:
    """Direct/proportional terms from the magnitude slope at the top of the band."""
    n = f.shape[0]
    s = _slope(f, np.abs(h), slice(n - max(3, n // 10), n)) + integrators
    return s > -0.5, s > 0.5


#: Hypotheses whose BIC on the thinned copy differ by less than this are compared again
#: on every point (a difference above 10 is "very strong" evidence: R. E. Kass and
#: A. E. Raftery, "Bayes factors", J. Amer. Statist. Assoc. 90(430), 1995).
CLOSE_CALL = 10.0
#: Evaluations a pruned hypothesis gets before it is judged against the others (one
#: still within reach of the best is then refined to convergence).
PRUNED_NFEV = 60
#: When the no-delay scan's first order already reaches the floor, it restarts this
#: many orders lower.
DROP_STEP = 3
#: Orders and delays are scanned on at most this many points (see Context.subsample).
SCAN_POINTS = 250


def _result_bic(result: FitResult) -> float:
    """Schwarz's criterion of a finished fit on all its points (see :func:`_bic`)."""
    n_res = 2 * result.stats["points"]
    p = len(result.varied)
    chisqr = max(result.stats["reduced_chi2"] * max(n_res - p, 1), n_res * NEGLIGIBLE ** 2)
    return float(n_res * np.log(chisqr / n_res) + p * np.log(n_res))


def _bic(ref: Refined, n_res: int) -> float:
    """Schwarz's Bayesian information criterion of a refined fit (Gaussian residuals,
    scale estimated): N·ln(χ²/N) + p·ln N (G. Schwarz, Ann. Statist. 6(2), 1978)."""
    # Fits far below the noise floor (noiseless data) are equally exact: compare their size only.
    chisqr = max(ref.chisqr, n_res * NEGLIGIBLE ** 2)
    return float(n_res * np.log(chisqr / n_res) + len(ref.varied) * np.log(n_res))


def _order_and_delay(ctx: Context, f, h, order, delay) -> tuple[list[Attempt], list[Attempt]]:
    """Vector fits to refine: the best without a delay, and with one when ``delay="auto"``.

    With ``delay="auto"`` the order is first chosen with a delay searched at
    each order (starting from the excess-phase estimate), then without a delay
    up to a few orders more.  A delay and a damped pair near the top of the
    band look alike to vector fitting, so both candidates are refined and
    compared afterwards (:func:`fit`).  Scans run on a thinned sweep; the
    candidates' residues are re-solved on every point.

    Returns
    -------
    candidates, scan
    """
    fixed_tau = float(delay) if not isinstance(delay, str) else 0.0
    tau0 = excess_phase_delay(f, h) if delay == "auto" else 0.0
    try_delay = delay == "auto" and tau0 * TWO_PI * f[-1] >= DELAY_MIN_PHASE
    sub = ctx.subsample(SCAN_POINTS)
    scan: list[Attempt] = []
    with_delay = None
    extra: list[Attempt] = []
    if order != "auto":
        n = int(order)
        att = attempt(sub, n, fixed_tau)
        if att.chi > CHI_OK:
            # A fresh start may miss a weak feature; build up to n as the scan does.
            scan = choose_order(sub, fixed_tau, n_min=1, n_max=n, scan_all=True)[1]
            att = min([att, scan[-1]], key=lambda x: x.chi)
        if try_delay:
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
        top = min(with_delay.order + 4, max_order(sub.s.shape[0]))
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
    # The scans' poles (settled to 1e-4 near the floor) only start the refinement,
    # which is the estimator: they are carried to every point as they are.
    out = [polish(ctx, att)]
    for a in ([with_delay] if with_delay is not None else []) + extra:
        if np.isfinite(a.chi):
            out.append(polish(ctx, a))
    return out, scan


def fit(
    resp: FrequencyResponse,
    order: int | str = "auto",
    delay: float | str = "auto",
    band: tuple[float | None, float | None] | None = None,
    fix: dict[str, float] | None = None,
    weighting: str = "relative",
    integrators: int | str = 0,
    bounds: dict[str, tuple[float, float]] | None = None,
) -> FitResult:
    """Fit a pole/zero model (with optional delay) to a measured response.

    Parameters
    ----------
    resp
        The measured sweep.
    order
        Number of poles (integrators not counted), or ``"auto"``: raise the
        order until the residual reaches the noise floor.
    delay
        ``"auto"`` (estimate and fit a transport delay when the phase shows
        one), ``"none"``, or a known delay in seconds (held fixed).
    band
        (f_min_hz, f_max_hz) to fit; either may be None.
    fix
        Parameters held at given values, by name (e.g. ``{"zero1_hz": 12e3}``).
    weighting
        ``"relative"`` (errors in dB and degrees; default) or ``"absolute"``
        (plain complex error, 1/stddev weights when the file has them).
    integrators
        Poles fixed at the origin (a measured loop gain), or ``"auto"``.
    bounds
        (lower, upper) limits per parameter name.

    Returns
    -------
    FitResult

    Raises
    ------
    InputError
        Bad options or a band with too few points.
    FitError
        The data cannot be fitted as asked (too few points, constant response...).
    """
    if not isinstance(resp, FrequencyResponse):
        raise InputError(f"expected a FrequencyResponse, got {type(resp).__name__}")
    _check_options(order, delay, weighting, integrators)
    settings: dict[str, Any] = {"order": order, "delay": delay, "band": list(band) if band else None,
                                "fix": dict(fix or {}), "weighting": weighting,
                                "integrators": integrators,
                                "bounds": {k: list(v) for k, v in (bounds or {}).items()}}
    if band is not None:
        resp = resp.band(*band)
    f, h = resp.freq_hz, resp.response
    n_pts = f.shape[0]
    mag = np.abs(h)
    if np.any(mag == 0):
        raise FitError("the response is exactly zero at some points; a log fit needs |H| > 0")
    lnm, ph = np.log(mag), np.unwrap(np.angle(h))
    if np.ptp(lnm) < 1e-9 and np.ptp(ph) < 1e-9:
        raise FitError("the response is constant over the band: there is nothing for poles and "
                       "zeros to fit (a pure gain)")
    sigma = point_sigma(h, resp.stddev, resp.coherence, resp.weight)
    m = detect_integrators(f, h) if integrators == "auto" else int(integrators)
    scale = TWO_PI * float(np.sqrt(f[0] * f[-1]))
    s_sc = 1j * TWO_PI * f / scale
    direct, prop = _hf_terms(f, h, m)
    w = vf_weight(h, sigma, weighting, resp.stddev)
    if not np.any(w > 0):
        raise FitError("no point has a usable weight")
    ctx = Context(s=s_sc, scale=scale, h=h, sigma=sigma, w=w, integrators=m,
                  direct=direct, proportional=prop)

    if order != "auto":
        need = int(order) + 3
        if n_pts < need:
            raise FitError(f"order {order} needs at least {need} points in the band; it holds {n_pts}")

    def run(ctx: Context) -> FitResult:
        # ----- delay and order, then physical parameters and refinement -------------
        cands, scan = _order_and_delay(ctx, f, h, order, delay)
        fixed = dict(fix or {})
        if not isinstance(delay, str) and delay > 0:
            fixed.setdefault("delay_s", float(delay))
        s = 1j * TWO_PI * f
        sig_abs = None
        if weighting == "absolute":
            # The stddev column is the σ of the complex response: a circular error puts
            # σ/√2 into each of the real and imaginary parts the residual is made of.
            sig_abs = resp.stddev / np.sqrt(2.0) if resp.stddev is not None else np.full(
                n_pts, float(np.median(np.concatenate([scatter_sigma(h.real), scatter_sigma(h.imag)]))))
        # Hypotheses are refined, pruned and compared on the thinned copy the scans
        # used (each decision is a chi-square difference against ln N, valid at any
        # N); only the winner is refined on every point, from there.
        idx = ctx.subsample_index(SCAN_POINTS)
        sig_abs_sub = None if sig_abs is None else sig_abs[idx]

        # Trial refinements that only compare χ² between candidates run without
        # lmfit's per-call overhead (same algorithm, refine(quick=True)); the
        # refinement the result reports goes through lmfit (_final).
        def refit_sub(st_, v_, max_nfev=200):
            return refine(st_, v_, s[idx], h[idx], sigma.mag[idx], sigma.phase[idx], fix=fixed,
                          bounds=bounds, weighting=weighting, sig_abs=sig_abs_sub, max_nfev=max_nfev,
                          quick=True)

        def refit_quick(st_, v_, max_nfev=200):
            return refine(st_, v_, s, h, sigma.mag, sigma.phase, fix=fixed, bounds=bounds,
                          weighting=weighting, sig_abs=sig_abs, max_nfev=max_nfev, quick=True)

        def refit(st_, v_, max_nfev=200):
            return refine(st_, v_, s, h, sigma.mag, sigma.phase, fix=fixed, bounds=bounds,
                          weighting=weighting, sig_abs=sig_abs, max_nfev=max_nfev)

        worth = _screen(cands, 2 * idx.shape[0])
        trial_sub = refit_sub
        single = len(worth) == 1
        if single:
            # Nothing to compare: refine (lmfit) and prune on every point straight away.
            idx, refit_sub, trial_sub = np.arange(n_pts), refit, refit_quick
        n_sub = 2 * idx.shape[0]
        starts = []
        missing: InputError | None = None
        for att in worth:
            try:
                starts.append((att, *_start(att, ctx, f, delay, fixed, refit_sub)))
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
        starts.sort(key=lambda o: _bic(o[2], n_sub))
        may_add = delay == "auto" and "delay_s" not in fixed
        outcomes = []
        for att, st0, ref0, notes0 in starts:
            if outcomes and _bic_floor(st0, ref0, f[-1], n_sub, may_add) > min(
                    _bic(o[2], n_sub) for o in outcomes) + CLOSE_CALL:
                continue
            outcomes.append((att, *_pruned(st0, ref0, notes0, ctx, f, idx, fixed, bounds, refit_sub,
                                           add_delay=may_add, trial=trial_sub)))
        # A hypothesis whose refinement stopped at its cap is refined to the end when
        # it is still in the running; one far behind is left where it stopped.
        for i, (att, st_, ref_, nt) in enumerate(outcomes):
            if not ref_.success and _bic(ref_, n_sub) - min(
                    _bic(o[2], n_sub) for o in outcomes) < 2 * CLOSE_CALL:
                outcomes[i] = (att, st_, refit_sub(st_, ref_.values), nt)
        if not outcomes:
            raise FitError("vector fitting failed: the model does not evaluate on the band "
                           "(check the data for gaps or exact zeros)")
        # Delay or no delay: the information criterion of the refined fits decides
        # (BIC rather than AIC: a many-pole rational can mimic a delay, and BIC's
        # stronger penalty keeps the simpler explanation unless the data insist).
        on_all = idx.shape[0] == n_pts
        outcomes.sort(key=lambda o: _bic(o[2], n_sub))
        best_bic = _bic(outcomes[0][2], n_sub)
        close = [o for o in outcomes if _bic(o[2], n_sub) - best_bic < CLOSE_CALL]
        if len(close) > 1 and not on_all:
            # A close call on the thinned copy is decided on every point.
            close = [(a, st_, refit_quick(st_, ref_.values), nt) for a, st_, ref_, nt in close]
            close.sort(key=lambda o: _bic(o[2], 2 * n_pts))
            outcomes = close
        att, st, ref, notes = outcomes[0]
        st, ref, notes = _final(st, ref, notes, refit, refit_quick, fixed, bounds, f, sigma,
                                refined=single)
        return _build_result(resp, st, ref, att, scan, sigma, notes, fixed, settings, scale)

    result = run(ctx)
    if result.stats["mirrored_poles"]:
        # Vector fitting had to mirror right-half-plane poles: the plant may really be
        # unstable (a stable plant's fit rarely ends with mirrored poles: none of the 120
        # fits of benchmarks/fit_accuracy.py does, it prints the count).  Fit again keeping such poles where the data put them;
        # that fit wins when the mirrored one stays clearly above the floor and it
        # reaches the floor or halves the residual, or when its BIC is lower by more
        # than CLOSE_CALL (the mirrored fit can reach the floor with a contrived
        # structure, e.g. a sign flip made of a pole and zero far below the band).
        alt = run(replace(ctx, mirror=False))
        chi, alt_chi = result.stats["residual_over_floor"], alt.stats["residual_over_floor"]
        if (chi > UNSTABLE_RETRY and (alt_chi <= CHI_OK or alt_chi < 0.5 * chi)) or \
                _result_bic(alt) < _result_bic(result) - CLOSE_CALL:
            result = replace(alt, notes=(*alt.notes, "fitted again without mirroring right-half-"
                                         "plane poles: the plant appears to be unstable"))
    return result


#: A candidate whose vector-fitting BIC is worse than the best one's by more than this
#: fraction of the number of residuals is not worth refining (VF's fixed point is within
#: a few percent of the least-squares optimum in χ²: common practice, no source).
SCREEN = 0.25


def _screen(cands: list[Attempt], n_res: int) -> list[Attempt]:
    """Candidates worth refining: finite, and not hopeless against the best by BIC."""
    ok = [a for a in cands if np.isfinite(a.chi)]
    if len(ok) <= 1:
        return ok

    def bic(a: Attempt) -> float:
        p = 2 * a.order + (1 if a.tau_s > 0 else 0) + 1
        return n_res * np.log(max(a.chi, NEGLIGIBLE) ** 2) + p * np.log(n_res)

    best = min(bic(a) for a in ok)
    return [a for a in ok if bic(a) - best <= SCREEN * n_res]


def _may_prune_cancelling(fixed, bounds) -> bool:
    """Cancelling groups are pruned unless the user holds or bounds a pole or zero."""
    held = list(fixed) + list(bounds or {})
    return not any(key.startswith(("pole", "pair", "zero")) for key in held)


def _cancel_note(n: int) -> str:
    return f"dropped {n} nearly cancelling pole/zero group(s) that the data do not need"


def _final(st: Structure, ref: Refined, notes: list[str], refit, trial, fixed, bounds, f, sigma,
           refined: bool = False) -> tuple[Structure, Refined, list[str]]:
    """Refine the chosen structure on every point with lmfit; drop a delay that is not
    significant.

    On every point a pair the thinned copy could not see (a spike between its
    points) may appear and cancel with a zero pair: the cancelling check runs
    again here, its trials refined by ``trial`` (:func:`refine` with ``quick``).
    ``ref`` may come from the thinned copy or from every point: the lmfit
    refinement starts from its values either way (from an optimum on every
    point it takes a few evaluations).  ``refined``: ``ref`` is lmfit's on every
    point already.
    """
    if not refined:
        ref = refit(st, ref.values)
    if _may_prune_cancelling(fixed, bounds):
        st, ref, n_cancel = _prune_cancelling(st, ref, trial, 2 * f.shape[0], f, sigma)
        if n_cancel:
            notes = [*notes, _cancel_note(n_cancel)]
            ref = refit(st, ref.values)
    if st.delay and "delay_s" not in fixed:
        i = st.names.index("delay_s")
        tv, te = ref.values[i], ref.stderr[i]
        if tv <= 0 or (np.isfinite(te) and tv < 2.0 * te):
            # Under 2σ: refine without the delay, and keep that unless χ² rises by more
            # than Schwarz's ln N (the rule of every other choice here): a parameter
            # strongly correlated with the delay can blow up its σ while the data
            # still need it.
            keep = [j for j in range(len(st.names)) if j != i]
            st2 = Structure(st.real_poles, st.pole_pairs, st.real_zeros, st.zero_pairs,
                            st.integrators, False)
            ref2 = refit(st2, ref.values[keep])
            if tv <= 0 or (ref2.chisqr - ref.chisqr) / ref.redchi <= np.log(2 * f.shape[0]):
                st, ref = st2, ref2
                notes = [*notes, "delay estimate not significant; fitted without delay"]
    return st, ref, notes


def _start(att: Attempt, ctx: Context, f, delay, fixed, refit
            ) -> tuple[Structure, Refined, list[str]]:
    """VF attempt -> physical parameters -> a first, capped refinement (and notes).

    ``refit`` refines on the points the scans used.
    """
    m, scale = ctx.integrators, ctx.scale
    fit_delay = delay == "auto" and att.tau_s > 0
    zeros, poles, k = vf_to_zpk(att.vf, scale)
    zeros, poles, k, notes = _clean_zpk(zeros, poles, k, f[0], f[-1])
    k_h = k * scale ** m  # the VF model was of H·(s/scale)^m
    has_delay = fit_delay or "delay_s" in fixed
    st, v0 = from_zpk(zeros, poles, k_h, att.tau_s, integrators=m, delay=has_delay)
    # Capped: spurious zeros above the band make it slow, and they are pruned next.
    return st, refit(st, v0, max_nfev=40), notes


def _bic_floor(st: Structure, ref: Refined, f_max: float, n_res: int,
               add_delay: bool = False) -> float:
    """The lowest BIC pruning could bring a start ``ref`` to, or −inf when unknown.

    Pruning removes parameters (at most every zero group above the band or
    near its top, every cancelling group and every group the data cannot
    locate) and never lowers χ² below the
    optimum of the larger model it is nested in.  So when the first
    refinement converged, its χ² with the fewest parameters pruning could
    leave is a floor; a capped refinement may still go down and gives none.
    ``add_delay``: pruning may swap lagging zeros for a delay (:func:`_prune_above`).
    """
    if not ref.success or not np.isfinite(ref.chisqr):
        return -np.inf
    cancel = [g for pair in _cancelling(st, ref.values) for g in pair] + _unidentified(st, ref)
    near = RHP_NEAR_TOP * f_max
    p_min = min(
        sum(1 for nm in ref.varied if not _in_groups(nm, cancel + [g for g, _ in _groups_above(
            st, ref.values, f_max, rhp_from=near if st.delay or swap else None)])) + int(swap)
        for swap in ((False, True) if add_delay and not st.delay else (False,)))
    chisqr = max(ref.chisqr, n_res * NEGLIGIBLE ** 2)
    return float(n_res * np.log(chisqr / n_res) + p_min * np.log(n_res))


def _pruned(st: Structure, ref: Refined, notes: list[str], ctx: Context, f, idx, fixed, bounds,
            refit, add_delay: bool = False, trial=None) -> tuple[Structure, Refined, list[str]]:
    """A started hypothesis (:func:`_start`) with the groups the data do not need pruned.

    ``refit`` refines on the points ``idx`` of the sweep ``f`` (``trial``, the
    pruning trials, when given); ``add_delay``:
    lagging zeros near and above the top of the band may become a delay.
    """
    notes = list(notes)
    n_res = 2 * idx.shape[0]
    n_drop = 0
    held = list(fixed) + list(bounds or {})
    kinds = {"zeros": not any(key.startswith("zero") for key in held),
             "poles": not any(key.startswith(("pole", "pair")) for key in held)}
    if any(kinds.values()):
        had_delay = st.delay
        st, ref, n_drop = _prune_above(st, ref, trial or refit, f[-1], n_res, TWO_PI * f[idx],
                                       delay_free="delay_s" not in fixed, add_delay=add_delay,
                                       **kinds)
        if st.delay and not had_delay:
            notes.append("a delay fits the phase lag that poles or zeros near and above the "
                         "top of the band had taken")
        if n_drop:
            where = "above or, with a delay, near the top of" if st.delay else "above"
            notes.append(f"dropped {n_drop} pole or zero group(s) {where} the band that the data do not need")
    if _may_prune_cancelling(fixed, bounds):
        # The point spacing that matters is the full sweep's, not the thinned copy's.
        st, ref, n_cancel = _prune_cancelling(st, ref, trial or refit, n_res, f, ctx.sigma)
        if n_cancel:
            notes.append(_cancel_note(n_cancel))
            n_drop += n_cancel
    if not any(key.startswith(("pole", "pair", "zero")) for key in held):
        st, ref, n_vague = _prune_unidentified(st, ref, trial or refit, n_res)
        if n_vague:
            notes.append(f"dropped {n_vague} pole or zero group(s) whose frequency the data "
                         "could not pin (σ above the value) and do not need")
            n_drop += n_vague
    if not ref.success or n_drop:
        # The capped runs above may have stopped short.  Capped again: only a
        # hypothesis still in the running is refined to the end (see fit()).
        ref = refit(st, ref.values, max_nfev=PRUNED_NFEV)
    return st, ref, notes


def _build_result(resp, st, ref: Refined, att: Attempt, scan, sigma, notes, fixed, settings,
                  att_scale: float) -> FitResult:
    f, h = resp.freq_hz, resp.response
    s = 1j * TWO_PI * f
    # Each group numbered from the lowest frequency up, as the names promise.
    ref, moved = renumbered(st, ref)
    held = sorted(k for k in moved if k in fixed or k in (settings.get("bounds") or {}))
    if held:
        notes = [*notes, "numbered from the lowest frequency up: " + ", ".join(
            f"{k} is now {moved[k]}" for k in held)]
    fixed = {moved.get(k, k): v for k, v in fixed.items()}
    zeros, poles, k, tau = to_zpk(st, ref.values)
    model = PlantModel(zeros=zeros, poles=poles, k=k, delay_s=max(tau, 0.0),
                       provenance=resp.provenance.derive("fit", settings))
    r = log_residual(st, ref.values, s, np.log(h))
    r_db, r_deg = _DB * r.real, np.degrees(r.imag)
    chi = float(np.sqrt(0.5 * np.mean((r.real / sigma.mag) ** 2 + (r.imag / sigma.phase) ** 2)))
    gain_unit = "ohm" if resp.quantity == "impedance" else ""
    if st.integrators:
        gain_unit = (gain_unit + "·" if gain_unit else "") + (
            "rad/s" if st.integrators == 1 else f"(rad/s)^{st.integrators}")
    units = st.units(gain_unit)
    params = tuple(
        Parameter(name=nm, value=float(ref.values[i]), stderr=float(ref.stderr[i]), unit=units[i],
                  fixed=nm in fixed)
        for i, nm in enumerate(st.names))
    cov = np.asarray(ref.covariance, dtype=float)
    corr = correlation(cov)
    warnings: list[str] = []
    # The refinement is the estimator; vector fitting only starts it.  A VF run
    # stopped by its iteration cap is reported (stats["vf_converged"]), and is a
    # warning only when the refinement did not converge from its poles either.
    converged = bool(ref.success)
    if not att.vf.converged and not ref.success:
        warnings.append(f"vector fitting did not converge in {att.vf.iterations} iterations")
    if not ref.success:
        warnings.append(f"refinement did not converge: {ref.message}")
    if ref.uncertainty_note:
        warnings.append(ref.uncertainty_note)
    for p in params:
        if p.name.endswith("_hz") and (abs(p.value) < 0.9 * f[0] or abs(p.value) > 1.1 * f[-1]):
            warnings.append(f"{p.name} = {p.value:.4g} Hz lies outside the measured band "
                            f"{f[0]:.4g}..{f[-1]:.4g} Hz: poorly identified")
    fl = np.abs(att.vf.flipped) * att_scale
    n_fl = int(np.sum((fl <= ZERO_LIMIT * TWO_PI * f[-1]) & (fl >= TWO_PI * f[0] / ZERO_LIMIT)))
    if n_fl:
        warnings.append(f"{n_fl} right-half-plane pole(s) were mirrored into the left "
                        "half-plane; if the plant is really unstable, this model is wrong")
    if not model.is_stable:
        warnings.append("the refined model has right-half-plane poles")
    if chi > FAR_ABOVE_FLOOR:
        warnings.append(f"residual is {chi:.1f}× the noise floor: the model misses part of the "
                        "response (try a higher --order or a narrower --band)")
    stats = {
        "rms_db": float(np.sqrt(np.mean(r_db ** 2))),
        "rms_deg": float(np.sqrt(np.mean(r_deg ** 2))),
        "max_db": float(np.max(np.abs(r_db))),
        "max_deg": float(np.max(np.abs(r_deg))),
        "reduced_chi2": float(ref.redchi),
        "points": int(f.shape[0]),
        "f_min_hz": float(f[0]),
        "f_max_hz": float(f[-1]),
        "order": int(model.order),
        "iterations": int(att.vf.iterations),
        "evaluations": int(ref.evaluations),
        "converged": converged,
        "vf_converged": bool(att.vf.converged),
        "noise_floor_db": sigma.floor_db,
        "noise_floor_deg": sigma.floor_deg,
        "noise_source": sigma.source,
        "residual_over_floor": chi,
        "mirrored_poles": n_fl,
        "delay_s": float(max(tau, 0.0)),
    }
    return FitResult(
        model=model, parameters=params, stats=stats, warnings=tuple(warnings), notes=tuple(notes),
        order_scan=tuple(a.summary() for a in scan), varied=ref.varied,
        covariance=cov, correlation=corr, integrators=st.integrators,
        provenance=resp.provenance.derive("fit", settings),
    )
