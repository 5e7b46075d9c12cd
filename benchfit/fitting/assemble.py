"""The last stage of a fit: the chosen refinement written out as a FitResult.

The model in scipy's zpk form, the parameter table, the residual statistics
against the noise floor, and the warnings a user must see.
"""

from __future__ import annotations

import numpy as np

from benchfit import numfmt
from benchfit.fitting.model import PlantModel
from benchfit.fitting.order import Attempt
from benchfit.fitting.parameters import TWO_PI, to_zpk
from benchfit.fitting.refine import Refined, log_residual, renumbered
from benchfit.fitting.result import FitResult, Parameter
from benchfit.fitting.uncertainty import correlation

#: Mirrored poles within this factor of the band's edges are reported.
MIRROR_NEAR = 3.0
#: A reduced χ² above this, at the measured noise, is always a warning: the model
#: misses part of the response (common practice, no source).
RESIDUAL_WARN = 1.5
_DB = 20.0 / np.log(10.0)


def build_result(resp, st, ref: Refined, att: Attempt, scan, sigma, notes, fixed, settings,
                  att_scale: float) -> FitResult:
    f, h = resp.freq_hz, resp.response
    s = 1j * TWO_PI * f
    # Each group numbered from the lowest frequency up, as the names promise.
    ref, moved = renumbered(st, ref)
    held = held_names_moved(st, ref.values, moved, fixed, settings.get("bounds") or {})
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
                  fixed=nm in fixed, at_bound=nm in ref.at_bound)
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
    if ref.at_bound:
        warnings.append(at_bound_warning(ref.at_bound, params))
    for p in params:
        if p.name.endswith("_hz") and not p.fixed and poorly_identified(p, f[0], f[-1]):
            warnings.append(f"{p.name} = {p.value:.4g} Hz lies outside the measured band "
                            f"{f[0]:.4g}..{f[-1]:.4g} Hz: poorly identified")
    hint = integrator_hint(st, params, f[0])
    if hint:
        warnings.append(hint)
    fl = np.abs(att.vf.flipped) * att_scale
    n_fl = int(np.sum((fl <= MIRROR_NEAR * TWO_PI * f[-1]) & (fl >= TWO_PI * f[0] / MIRROR_NEAR)))
    if n_fl:
        warnings.append(f"{n_fl} right-half-plane pole(s) were mirrored into the left "
                        "half-plane; if the plant is really unstable, this model is wrong")
    warnings += residual_warnings(ref, chi)
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


#: A frequency outside the band whose σ exceeds this fraction of it is poorly identified.
LOOSE = 0.2


def poorly_identified(p: Parameter, f_min: float, f_max: float) -> bool:
    """True for a frequency outside the band (by 10 %) whose σ is undetermined, or over
    :data:`LOOSE` of the value below the band.

    Above the band a finite but large σ gets a note instead
    (:func:`benchfit.fitting.final.loose_notes`: the data need the group);
    one located to a few percent by its effect in the band is not a warning.
    """
    v = abs(p.value)
    if f_min * 0.9 <= v <= 1.1 * f_max:
        return False
    sd = p.stderr
    if sd is None or not np.isfinite(sd):
        return True
    return bool(v < f_min and sd > LOOSE * v)


def held_names_moved(st, values, moved: dict[str, str], fixed: dict[str, float],
                     bounds: dict) -> list[str]:
    """The names the user fixed or bounded that the lowest-first renumbering gave away.

    Evidence weighed: a fixed name that moved (its value now sits under another
    name); a bounded name that moved *and* whose name now holds a value outside
    the user's bound.  When the group now under a bounded name keeps the bound
    (two pole pairs both held above it by :func:`~benchfit.fitting.ordering.rank_bounds`
    trade slots), the user's name still means what they asked: nothing to say.
    """
    v = dict(zip(st.names, np.asarray(values, dtype=float), strict=True))
    out = []
    for k in sorted(moved):
        if k in fixed:
            out.append(k)
        elif k in bounds and k in v:
            lo, hi = (float(x) for x in bounds[k])
            tol = 1e-9 * max(abs(v[k]), 1e-300)
            if not (lo - tol <= v[k] <= hi + tol):
                out.append(k)
    return out


#: A real pole this far below the bottom of the band acts there as an integrator
#: (within 1/INTEGRATOR_BELOW rad of −90°; common practice, no source).
INTEGRATOR_BELOW = 30.0


def integrator_hint(st, params, f_min: float) -> str | None:
    """A hint to fit an integrator as one, or None.

    Evidence weighed: the model has no integrator (``--integrators`` 0) and a
    stable real pole below ``f_min / INTEGRATOR_BELOW``.  Over the band such a
    pole is −20 dB/decade and −90° to within a degree or two: an integrator whose
    frequency and gain the data can only trade against each other (gain and pole
    come out with σ of 100 % and more, and the refinement crawls along that
    valley), where ``--integrators 1`` fits the same response with one parameter.
    """
    if st.integrators:
        return None
    low = [p for p in params if p.name.startswith("pole") and not p.fixed
           and 0 < p.value < f_min / INTEGRATOR_BELOW]
    if not low:
        return None
    p = low[0]
    return (f"{p.name} = {p.value:.3g} Hz lies far below the band ({f_min:.4g} Hz up): over the "
            "band it acts as an integrator; --integrators 1 (or auto) fits it as one, with a "
            "gain the data determine")


def at_bound_warning(names, params) -> str:
    """The warning for parameters that ended on the user's bound: no σ for them."""
    val = {p.name: p for p in params}
    said = ", ".join(f"{n} = {numfmt.quantity(val[n].value, val[n].unit, numfmt.FIT_DIGITS)}"
                     for n in names)
    return (f"at bound: {said}; the data pull it past the bound (the --bound given, the one that "
            "keeps a bounded or fixed frequency at the rank its name gives, or zero for a stable "
            "pole or a causal delay), so the covariance is not valid there and no σ is "
            "given for it (the others' σ hold it at the bound); widen the bound to let the data "
            "place it")


def residual_warnings(ref: Refined, chi: float) -> list[str]:
    """The warning for a residual above the noise (reduced χ² > :data:`RESIDUAL_WARN`).

    The standard errors come from the Jacobian scaled by the reduced χ²
    (:mod:`benchfit.fitting.refine`), so σ grows by √χ² where the model does
    not reach the floor; the warning says so, since such σ measure the misfit
    as much as the noise.
    """
    if not (np.isfinite(ref.redchi) and ref.redchi > RESIDUAL_WARN):
        return []
    return [f"residual above the noise: reduced chi-square {ref.redchi:.3g} at the measured noise "
            f"({chi:.2f}× the noise floor); the model misses part of the response (try a higher "
            f"--order, --delay auto or a narrower --band); standard errors are scaled by "
            f"√χ² = {np.sqrt(ref.redchi):.3g}"]
