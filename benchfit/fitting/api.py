"""``fit()``: from a measured FrequencyResponse to a FitResult.

The stages, in the order docs/fitting.md describes them:

1. :func:`benchfit.fitting.problem.prepare` — band, per-point σ (weights.py),
   vector-fitting context;
2. :func:`benchfit.fitting.hypotheses.candidates` — order and delay scans
   (order.py, delay.py) give vector-fitting candidates;
3. :func:`benchfit.fitting.hypotheses.race` — each candidate factored into
   physical parameters, refined, pruned (pruning.py) and compared by the
   rules of selection.py;
4. :func:`benchfit.fitting.final.final` — the winner refined on every point
   (refine.py: trust-region least squares, checked against lmfit's);
5. :func:`benchfit.fitting.assemble.build_result` — statistics and warnings;
6. stability: with ``stable`` (the default for passive data) every pole is held
   in the left half-plane; otherwise, when vector fitting had to mirror poles,
   the same again without mirroring (:func:`benchfit.fitting.selection.unstable_wins`
   decides), and an unstable result is weighed against the best stable fit
   (:func:`benchfit.fitting.selection.unstable_demanded`).
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from benchfit.data.response import FrequencyResponse
from benchfit.errors import FitError, InputError
from benchfit.fitting.assemble import build_result
from benchfit.fitting.final import final
from benchfit.fitting.hypotheses import candidates, race
from benchfit.fitting.order import Context
from benchfit.fitting.problem import Problem, prepare
from benchfit.fitting.result import FitResult
from benchfit.fitting.selection import unstable_demanded, unstable_wins


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



def _check_fixed_values(fix: dict[str, float] | None) -> None:
    """Refuse a held frequency or Q that no group of the model can have (InputError naming it).

    A pole, zero or pair at 0 Hz is a factor s (an integrator or a differentiator), which the
    normalised factors (1 + s/ω) cannot hold: it made every residual NaN.  Integrators are
    asked for with ``integrators``; a Q of 0 or a non-finite value is no group either.
    """
    for name, value in (fix or {}).items():
        if not name.endswith(("_hz", "_q")):
            continue
        v = float(value)
        if not np.isfinite(v) or v == 0.0:
            hint = (" (a pole at 0 Hz is an integrator: use --integrators)"
                    if name.startswith("pole") and v == 0.0 else "")
            raise InputError(f"{name}={value!r}: expected a finite, non-zero "
                             f"{'Q' if name.endswith('_q') else 'frequency'}{hint}", source="--fix")


#: Frequencies a fit accepts, Hz: far beyond any bench measurement on both sides (common
#: practice, no source); past about 1e150 Hz the squares of ω leave the float range.
FIT_SPAN_HZ = (1e-12, 1e15)


def check_fit_span(resp: FrequencyResponse) -> None:
    """Refuse a sweep whose frequencies lie outside :data:`FIT_SPAN_HZ` (FitError naming its file).

    Such a sweep is almost always a column in the wrong unit; fitting it overflowed deep inside
    the arithmetic ("Geometric sequence cannot include zero", "SVD did not converge").
    """
    f = resp.freq_hz
    lo, hi = FIT_SPAN_HZ
    if f.size and not (f[0] >= lo and f[-1] <= hi):
        src = ", ".join(resp.provenance.sources) or "the sweep"
        raise FitError(f"{src}: frequencies {f[0]:.3g}..{f[-1]:.3g} Hz lie outside the "
                       f"{lo:g}..{hi:g} Hz a fit accepts; check the frequency column's unit "
                       "(--freq-unit)")


def fit(
    resp: FrequencyResponse,
    order: int | str = "auto",
    delay: float | str = "auto",
    band: tuple[float | None, float | None] | None = None,
    fix: dict[str, float] | None = None,
    weighting: str = "relative",
    integrators: int | str = 0,
    bounds: dict[str, tuple[float, float]] | None = None,
    stable: bool | None = None,
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
    stable
        True: every pole in the left half-plane; False: poles where the data
        put them; None (default): True for passive data (an impedance, a
        Touchstone S-parameter never above 1), else False.  A right-half-plane
        pole in a result is always a warning saying whether the data demand
        it (:func:`benchfit.fitting.selection.unstable_demanded`).

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
    _check_fixed_values(fix)
    check_fit_span(resp)
    try:
        return _fit_stages(resp, order, delay, band, fix, weighting, integrators, bounds, stable)
    except FitError as e:
        # every fit error names the sweep it is about (the stages know only the numbers)
        src = ", ".join(resp.provenance.sources)
        if src and not str(e).startswith(src):
            raise FitError(f"{src}: {e}") from None
        raise


def _fit_stages(resp, order, delay, band, fix, weighting, integrators, bounds, stable) -> FitResult:
    """The stages of :func:`fit` after its checks (see there)."""
    pb = prepare(resp, order, delay, band, fix, weighting, integrators, bounds, stable)
    result = _fit_with(pb, pb.ctx)
    if pb.stable:
        return replace(result, notes=(*result.notes, "poles held in the left half-plane (" + (
            "--stable)" if stable else "passive data; --no-stable lets them go anywhere)")))
    if result.stats["mirrored_poles"]:
        # Vector fitting had to mirror right-half-plane poles: the plant may really be
        # unstable.  Fit again keeping such poles where the data put them.
        alt = _fit_with(pb, replace(pb.ctx, mirror=False))
        if unstable_wins(result, alt):
            result = replace(alt, notes=(*alt.notes, "fitted again without mirroring right-half-"
                                         "plane poles: the plant appears to be unstable"))
    if not result.model.is_stable:
        result = _stability_verdict(pb, result)
    return result


def _stability_verdict(pb: Problem, unstable: FitResult) -> FitResult:
    """An unstable result against the best stable fit of the same data.

    The stable fit replaces it when the data do not prefer the unstable one
    by the information criterion; otherwise the unstable result stays with a
    warning that says whether the data demand its right-half-plane poles
    (:func:`benchfit.fitting.selection.unstable_demanded`).
    """
    n_rhp = int(np.sum(unstable.model.poles.real > 0))
    stable = _fit_with(replace(pb, stable=True), replace(pb.ctx, mirror=True))
    demanded, margin = unstable_demanded(unstable, stable)
    if margin <= 0:
        return replace(stable, notes=(*stable.notes, f"a stable model fits as well (BIC "
                                      f"{-margin:.1f} lower) as one with {n_rhp} right-half-plane "
                                      "pole(s); the stable one is kept"))
    verdict = (f"the data demand them: the best stable fit's BIC is {margin:.0f} higher "
               f"(residual {stable.stats['residual_over_floor']:.2f}× the noise floor)" if demanded
               else f"the data do not clearly demand them: the best stable fit's BIC is only "
               f"{margin:.1f} higher; --stable holds the poles in the left half-plane")
    # the verdict as figures too, for callers that act on it (benchfit.loop.openloop)
    stats = {**unstable.stats, "rhp_poles": n_rhp, "rhp_demanded": demanded,
             "rhp_bic_margin": float(margin)}
    return replace(unstable, stats=stats, warnings=(*unstable.warnings, f"the model has {n_rhp} "
                                                    f"right-half-plane pole(s) (unstable); {verdict}"))


def _fit_with(pb: Problem, ctx: Context) -> FitResult:
    """Stages 2 to 5 with the vector-fitting context ``ctx`` (mirroring or not)."""
    cands, scan = candidates(ctx, pb.f, pb.order, pb.delay)
    hyp, refined = race(pb, cands)
    st, ref, notes = final(pb, hyp.st, hyp.ref, hyp.notes, refined=refined)
    return build_result(pb.resp, st, ref, hyp.att, scan, pb.sigma, notes, pb.fixed, pb.settings,
                        ctx.scale)
