"""Least-squares fits of step models to a scope trace (lmfit), with standard errors.

Three models:

- ``"second-order"``: ζ, fn, initial level, step size and step instant t0;
- ``"third-order"``: the same pair times a real pole at fp;
- ``"loop"``: the closed loop T/(1+T) of a given loop gain T, with the loop's
  gain factor and its dominant pole pair (fn, ζ of the lowest-frequency complex
  pair, or of the two lowest real poles) free, so a scope step refines the
  frequency-domain model.

Starting values come from the model-free measurements (ζ from the overshoot or
the log decrement, fn from the rise time, t0 from the 10 % and 90 % crossings);
without overshoot a few ζ are tried.  Residuals are weighted by the noise of
the flat part before the step; clipped samples are left out.  Standard errors
are lmfit's (covariance scaled by the reduced χ²), multiplied by
√((1+ρ)/(1−ρ)) when the residuals' lag-1 autocorrelation ρ is positive (the
AR(1) variance-inflation factor, a common approximation for correlated noise
such as a band-limited scope front end).

Here: the starting values, the fits (:func:`fit_step`, :func:`fit_load_step`)
and loop mode (:func:`dominant_pair`, :func:`loop_with`).  The result object
and the packaging of an lmfit outcome (statistics, the inflation above) are in
:mod:`benchfit.steps.stepfit`, re-exported here.
"""

from __future__ import annotations

import math
from functools import lru_cache

import lmfit
import numpy as np

from benchfit.errors import FitError, InputError
from benchfit.fitting.model import PlantModel
from benchfit.steps.features import clipped_runs, difference_sigma, trace_arrays
from benchfit.steps.loadstep import LoadStepMeasurement, measure_load_step
from benchfit.steps.measure import StepMeasurement, measure_step
from benchfit.steps.models import (
    TWO_PI,
    closed_loop_unit_step,
    resonant_load_step,
    second_order_step,
    third_order_step,
    unit_second_order,
    unit_second_order_slope,
    zeta_from_overshoot_pct,
)
from benchfit.steps.stepfit import ALL_MODELS, MAX_EVALUATIONS, MODELS, StepFit, package

__all__ = ["ALL_MODELS", "MODELS", "StepFit", "dominant_pair", "fit_load_step", "fit_step", "loop_with"]


# ----- starting values -----------------------------------------------------------------
@lru_cache(maxsize=256)
def _unit_crossings(zeta: float) -> tuple[float, float]:
    """10 % and 90 % crossing times of the second-order step with ωn = 1 rad/s."""
    tau = np.linspace(0.0, 40.0 * max(zeta, 1.0) + 20.0, 40001)
    u = unit_second_order(tau, zeta, 1.0)
    return float(np.interp(0.1, np.maximum.accumulate(u), tau)), \
        float(np.interp(0.9, np.maximum.accumulate(u), tau))


def _second_order_start(m: StepMeasurement, zeta: float) -> dict[str, float]:
    a10, a90 = _unit_crossings(round(zeta, 4))
    # A rise measured as 0 (both crossings on one sample, e.g. with --step-time) is one
    # sample at most: start from there rather than divide by zero.
    rise = m.rise_time_s if math.isfinite(m.rise_time_s) and m.rise_time_s > 0 else m.sample_interval_s
    wn = (a90 - a10) / rise
    t0 = 0.5 * ((m.t10_s - a10 / wn) + (m.t90_s - a90 / wn))
    return {"zeta": zeta, "fn_hz": wn / TWO_PI, "initial_v": m.initial_v, "step_v": m.step_v, "t0_s": t0}


def _zeta_candidates(m: StepMeasurement) -> list[float]:
    if m.overshoot_pct > 0.5:
        return [zeta_from_overshoot_pct(min(m.overshoot_pct, 99.0))]
    if np.isfinite(m.zeta_from_decrement):
        return [float(m.zeta_from_decrement)]
    return [0.7, 1.0, 1.5, 3.0]


# ----- the fit itself ----------------------------------------------------------------
def _params(start: dict[str, float], t: np.ndarray) -> lmfit.Parameters:
    span = t[-1] - t[0]
    p = lmfit.Parameters()
    for name, v in start.items():
        if name in ("zeta", "pair_zeta"):
            p.add(name, value=v, min=1e-3, max=50.0)
        elif name in ("fn_hz", "fp_hz", "pair_fn_hz"):
            p.add(name, value=v, min=v / 100.0, max=v * 100.0)
        elif name == "loop_gain":
            p.add(name, value=v, min=1e-3, max=1e3)
        elif name == "t0_s":
            p.add(name, value=min(max(v, t[0] - span), t[-1]), min=t[0] - span, max=t[-1])
        else:
            p.add(name, value=v)
    return p


def _run(fn, start, t, y, keep, sigma):
    params = _params(start, t)

    def resid(p):
        return (fn(t, p.valuesdict())[keep] - y[keep]) / sigma

    mini = lmfit.Minimizer(resid, params, nan_policy="raise")
    try:
        # A model that cannot describe the trace wanders for thousands of evaluations; cap them.
        return mini.leastsq(xtol=1e-10, ftol=1e-10, max_nfev=MAX_EVALUATIONS)
    except ValueError as e:  # lmfit's report of a non-finite model value
        raise FitError(f"the step fit failed: {e}") from None


def _cost(fn, start, t, y, keep):
    return float(np.sum((fn(t, start)[keep] - y[keep]) ** 2))


def _so(t, v):
    return second_order_step(t, v["zeta"], v["fn_hz"], v["initial_v"], v["step_v"], v["t0_s"])


def _to(t, v):
    return third_order_step(t, v["zeta"], v["fn_hz"], v["fp_hz"], v["initial_v"], v["step_v"], v["t0_s"])


def fit_step(data, *, model: str = "second-order", channel: str | int | None = None,
             measurement: StepMeasurement | None = None, loop: PlantModel | None = None,
             band: float = 0.02, step_time_s: float | None = None,
             exclude_clipped: bool = True) -> StepFit:
    """Fit a step model to a trace.

    Parameters
    ----------
    data
        A :class:`~benchfit.data.TimeTrace` or ``(time_s, samples)`` pair.
    model
        ``"second-order"``, ``"third-order"`` or ``"loop"`` (needs ``loop``).
    channel
        Channel name or 0-based index.
    measurement
        Model-free measurements of the same trace (computed when not given).
    loop
        Loop gain T as a :class:`PlantModel` for the ``"loop"`` model.
    band, step_time_s
        Passed to :func:`measure_step` when ``measurement`` is not given.
    exclude_clipped
        Leave samples in runs at the record's extremes (clipping) out of the fit.

    Raises
    ------
    InputError
        Unknown model, ``"loop"`` without a loop gain, bad trace.
    FitError
        The least-squares fit fails.
    """
    if model not in MODELS:
        raise InputError(f"model {model!r} unknown; expected one of {MODELS} (loop:design.json on the CLI)",
                         source="--model")
    t, y, name, source = trace_arrays(data, channel)
    m = measurement or measure_step(data, channel=channel, band=band, step_time_s=step_time_s)
    keep, sigma, warnings = _weights(y, m, abs(m.step_v), exclude_clipped)
    if model == "second-order":
        out, fn, extra = _best_second_order(t, y, keep, sigma, m), _so, {}
    elif model == "third-order":
        out, fn, extra = _third_order(t, y, keep, sigma, _best_second_order(t, y, keep, sigma, m)), _to, {}
    else:
        if loop is None:
            raise InputError("the loop model needs a loop gain (a design JSON with a loop model)",
                             source="--model")
        out, fn, extra = _loop_fit(t, y, keep, sigma, m, loop)
    if not out.success and out.nfev == 0:
        raise FitError(f"step fit did not run: {out.message}")
    return package(model, out, fn, t, y, keep, sigma, m, warnings, extra, name, source)


def _weights(y, m, scale: float, exclude_clipped: bool) -> tuple[np.ndarray, float, list[str]]:
    """Samples to fit (clipped ones out), the noise σ that weights them, and notes."""
    keep = np.ones(y.size, bool)
    warnings: list[str] = []
    if exclude_clipped and m.clipped_samples:
        mask, _ = clipped_runs(y, ignore_levels=(m.initial_v, m.final_v) if m.noise_v == 0 else ())
        keep = ~mask
        warnings.append(f"{int(mask.sum())} clipped samples left out of the fit")
    sigma = m.noise_v if m.noise_v > 0 and np.isfinite(m.noise_v) else difference_sigma(y)
    if not sigma > 0:
        sigma = 1e-9 * max(scale, 1e-30)  # noise-free synthetic record
    if keep.sum() < 10:
        raise FitError(f"only {int(keep.sum())} usable samples; a step fit needs at least 10")
    return keep, sigma, warnings


def _best_second_order(t, y, keep, sigma, m):
    starts = [_second_order_start(m, z) for z in _zeta_candidates(m)]
    if len(starts) > 1:  # no overshoot: try a few ζ and keep the best few starts
        starts.sort(key=lambda s: _cost(_so, s, t, y, keep))
        starts = starts[:2]
    best = None
    for s in starts:
        r = _run(_so, s, t, y, keep, sigma)
        if best is None or r.chisqr < best.chisqr:
            best = r
    return best


def _third_order(t, y, keep, sigma, so):
    base = so.params.valuesdict()
    best = None
    for ratio in (2.0, 8.0):  # the real pole near the pair, or well above it
        s = dict(base)
        s["fp_hz"] = ratio * base["fn_hz"]
        r = _run(_to, s, t, y, keep, sigma)
        if best is None or r.chisqr < best.chisqr:
            best = r
    return best


# ----- load steps -----------------------------------------------------------------------
def _ls(t, v):
    return resonant_load_step(t, v["zeta"], v["fn_hz"], v["initial_v"], v["droop_v"], v["resonant_v"],
                              v["t0_s"])


def _load_step_start(m: LoadStepMeasurement, zeta: float) -> dict[str, float]:
    root = math.sqrt(max(1.0 - zeta * zeta, 1e-6))
    if np.isfinite(m.ringing_freq_hz) and zeta < 1:
        wn = TWO_PI * m.ringing_freq_hz / root
    else:  # the resonant term peaks at atan(√(1−ζ²)/ζ)/ωd after the step
        wn = math.atan2(root, zeta) / (root * max(m.peak_time_s, m.sample_interval_s))
    tau = np.linspace(0.0, 20.0 / (zeta * wn), 4001)
    peak = float(np.max(2.0 * zeta * unit_second_order_slope(tau, zeta, wn)))
    return {"zeta": zeta, "fn_hz": wn / TWO_PI, "initial_v": m.initial_v, "droop_v": m.shift_v,
            "resonant_v": (m.deviation_v - 0.5 * m.shift_v) / peak, "t0_s": m.step_time_s}


def fit_load_step(data, *, channel: str | int | None = None,
                  measurement: LoadStepMeasurement | None = None, band: float = 0.02,
                  band_v: float | None = None, step_time_s: float | None = None,
                  exclude_clipped: bool = True) -> StepFit:
    """Fit the resonant output-impedance model to a load-step trace.

    The model is the response to a current step of
    Zcl = (R_dc·ωn² + R_p·2ζωn·s)/(s² + 2ζωn s + ωn²) (see
    :func:`~benchfit.steps.models.resonant_load_step`): parameters ζ, fn, the
    initial level, ``droop_v`` (−ΔI·R_dc), ``resonant_v`` (−ΔI·R_p) and t0.

    Raises
    ------
    InputError
        Bad trace.
    FitError
        Too few usable samples.
    """
    t, y, name, source = trace_arrays(data, channel)
    m = measurement or measure_load_step(data, channel=channel, band=band, band_v=band_v,
                                         step_time_s=step_time_s)
    keep, sigma, warnings = _weights(y, m, abs(m.deviation_v), exclude_clipped)
    zetas = [float(m.zeta_from_decrement)] if np.isfinite(m.zeta_from_decrement) else [0.2, 0.45, 0.8]
    starts = sorted((_load_step_start(m, z) for z in zetas), key=lambda s: _cost(_ls, s, t, y, keep))
    best = None
    for s in starts[:2]:
        r = _run(_ls, s, t, y, keep, sigma)
        if best is None or r.chisqr < best.chisqr:
            best = r
    return package("load-step", best, _ls, t, y, keep, sigma, m, warnings, {}, name, source)


# ----- loop mode -----------------------------------------------------------------------
def dominant_pair(loop: PlantModel) -> tuple[int, int] | None:
    """Indices of the loop gain's dominant pole pair, or None.

    The lowest-frequency complex pair; without one, the two lowest-frequency
    real poles.  Poles at the origin (integrators) are never part of it.
    """
    p = loop.poles
    scale = max(float(np.max(np.abs(p))) if p.size else 1.0, 1.0)
    nonzero = np.flatnonzero(np.abs(p) > 1e-12 * scale)
    upper = [i for i in nonzero if p[i].imag > 0]
    if upper:
        i = min(upper, key=lambda j: abs(p[j]))
        j = min((k for k in nonzero if k != i and abs(p[k] - np.conj(p[i])) <= 1e-9 * abs(p[i])),
                key=lambda k: abs(p[k]), default=None)
        return (i, j) if j is not None else None
    real = sorted((i for i in nonzero if abs(p[i].imag) <= 1e-12 * abs(p[i])), key=lambda k: abs(p[k]))
    return (real[0], real[1]) if len(real) >= 2 else None


def loop_with(loop: PlantModel, gain: float, pair: tuple[int, int] | None,
              pair_fn_hz: float | None = None, pair_zeta: float | None = None) -> PlantModel:
    """``loop`` with its gain scaled and its dominant pair moved to (fn, ζ).

    The pair is written as ωn²/(s² + 2ζωn s + ωn²), so moving it leaves the
    low-frequency gain alone: ``loop_with(T, 1, pair, fn0, ζ0)`` is T itself.
    """
    poles = loop.poles
    k = loop.k * gain
    if pair is not None and pair_fn_hz is not None:
        old = poles[list(pair)]
        wn = TWO_PI * pair_fn_hz
        root = np.sqrt(complex(pair_zeta * pair_zeta - 1.0))
        new = np.array([-wn * (pair_zeta - root), -wn * (pair_zeta + root)])
        k = k * wn * wn / float(np.real(np.prod(old)))
        poles = np.concatenate([np.delete(poles, list(pair)), new])
    return PlantModel(zeros=loop.zeros, poles=poles, k=k, delay_s=loop.delay_s,
                      provenance=loop.provenance.derive("refine_loop_from_step"))


def _pair_start(loop: PlantModel, pair) -> tuple[float, float]:
    a, b = loop.poles[list(pair)]
    wn = math.sqrt(abs(a * b))
    return wn / TWO_PI, float(-(a + b).real / (2.0 * wn))


def _loop_fit(t, y, keep, sigma, m, loop):
    pair = dominant_pair(loop)
    start: dict[str, float] = {"loop_gain": 1.0}
    if pair is not None:
        start["pair_fn_hz"], start["pair_zeta"] = _pair_start(loop, pair)

    def fn(tt, v):
        model = loop_with(loop, v["loop_gain"], pair, v.get("pair_fn_hz"), v.get("pair_zeta"))
        try:
            u, _ = closed_loop_unit_step(tt - v["t0_s"], model)
        except InputError:  # unstable trial point: steer the optimiser away
            return np.full(tt.shape, 1e6 * (abs(v["step_v"]) + 1.0))
        return v["initial_v"] + v["step_v"] * u

    # Align the model's own 10/90 % crossings with the measured ones for t0.
    tau = np.linspace(0.0, 4.0 * (t[-1] - t[0]), 20001)
    u0, _ = closed_loop_unit_step(tau, loop)
    c10 = float(tau[np.argmax(u0 >= 0.1)])
    c90 = float(tau[np.argmax(u0 >= 0.9)])
    start.update(initial_v=m.initial_v, step_v=m.step_v,
                 t0_s=0.5 * ((m.t10_s - c10) + (m.t90_s - c90)))
    out = _run(fn, start, t, y, keep, sigma)
    v = out.params.valuesdict()
    refined = loop_with(loop, v["loop_gain"], pair, v.get("pair_fn_hz"), v.get("pair_zeta"))
    notes = [] if pair is not None else ["the loop gain has no pole pair to refine; only its gain was fitted"]
    return out, fn, {"loop_model": refined, "notes": notes}
