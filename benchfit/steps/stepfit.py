"""The result of a step fit, and how a least-squares outcome becomes one.

:class:`StepFit` holds the fitted parameters with their standard errors, the
residual statistics, the fitted curve and, in loop mode, the refined loop
gain (JSON round trip, provenance).  :func:`package` turns an lmfit outcome
into it: residual rms against the noise of the flat part, and the standard
errors multiplied by √((1+ρ)/(1−ρ)) when the residuals' lag-1
autocorrelation ρ is positive (the AR(1) variance-inflation factor, a common
approximation for correlated noise), with the warnings that go with them.
The fits themselves are in :mod:`benchfit.steps.fit`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from benchfit.errors import InputError
from benchfit.fileio import as_float
from benchfit.fitting.model import PlantModel
from benchfit.fitting.result import Parameter
from benchfit.provenance import Provenance
from benchfit.steps.pm import MIN_RISE_SAMPLES

#: Models fit_step fits.
MODELS = ("second-order", "third-order", "loop")
#: Every model a StepFit can hold (the load-step model is fitted by fit_load_step).
ALL_MODELS = (*MODELS, "load-step")
#: Most model evaluations one least-squares run may use.
MAX_EVALUATIONS = 2000
_UNITS = {"zeta": "", "fn_hz": "Hz", "fp_hz": "Hz", "initial_v": "V", "step_v": "V", "t0_s": "s",
          "droop_v": "V", "resonant_v": "V",
          "loop_gain": "", "pair_fn_hz": "Hz", "pair_zeta": ""}


@dataclass(frozen=True, eq=False)
class StepFit:
    """A step model fitted to a trace.

    Parameters
    ----------
    model
        One of :data:`ALL_MODELS`.
    parameters
        Fitted parameters with one-sigma standard errors (zeta, fn_hz, initial_v,
        step_v, t0_s; plus fp_hz, or loop_gain / pair_fn_hz / pair_zeta).
    stats
        ``rms_v`` (residual rms), ``noise_v`` (noise of the flat part),
        ``rms_over_noise``, ``reduced_chi2``, ``points``, ``excluded_points``
        (clipped), ``evaluations``, ``converged``, ``residual_lag1`` and
        ``stderr_inflation``.
    time_s, fitted_v
        The fitted curve on the trace's time axis.
    loop_model
        The refined loop gain T (``"loop"`` model only).
    warnings
        What to be careful about.
    provenance
        Source and settings.
    """

    model: str
    parameters: tuple[Parameter, ...]
    stats: dict[str, Any]
    time_s: np.ndarray
    fitted_v: np.ndarray
    loop_model: PlantModel | None = None
    warnings: tuple[str, ...] = ()
    provenance: Provenance = field(default_factory=lambda: Provenance(step="fit_step"))

    def parameter(self, name: str) -> Parameter:
        for p in self.parameters:
            if p.name == name:
                return p
        raise KeyError(f"no parameter {name!r}; have {[p.name for p in self.parameters]}")

    def value(self, name: str) -> float:
        return self.parameter(name).value

    def stderr(self, name: str) -> float:
        return self.parameter(name).stderr

    def to_dict(self, include_curve: bool = True) -> dict[str, Any]:
        d = {
            "kind": "step_fit",
            "model": self.model,
            "parameters": [p.to_dict() for p in self.parameters],
            "stats": dict(self.stats),
            "loop_model": self.loop_model.to_dict() if self.loop_model is not None else None,
            "warnings": list(self.warnings),
            "provenance": self.provenance.to_dict(),
        }
        if include_curve:
            d["curve"] = {"time_s": self.time_s.tolist(), "fitted_v": self.fitted_v.tolist()}
        return d

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> StepFit:
        try:
            curve = d.get("curve") or {"time_s": [], "fitted_v": []}
            return cls(
                model=str(d["model"]),
                parameters=tuple(Parameter.from_dict(p) for p in d["parameters"]),
                stats=dict(d.get("stats", {})),
                time_s=np.asarray([as_float(v) for v in curve["time_s"]], float),
                fitted_v=np.asarray([as_float(v) for v in curve["fitted_v"]], float),
                loop_model=PlantModel.from_dict(d["loop_model"]) if d.get("loop_model") else None,
                warnings=tuple(d.get("warnings", ())),
                provenance=Provenance.from_dict(d.get("provenance")),
            )
        except KeyError as e:
            raise InputError(f"step fit has no {e.args[0]!r}") from None


def package(model, out, fn, t, y, keep, sigma, m, warnings, extra, name, source) -> StepFit:
    """The StepFit of an lmfit outcome ``out`` of model function ``fn`` on the trace (t, y).

    ``keep`` marks the samples fitted, ``sigma`` their weight, ``m`` the model-free
    measurement (noise, rise time), ``extra`` the loop model and notes of loop mode.
    """
    v = out.params.valuesdict()
    curve = fn(t, v)
    r = (y - curve)[keep]
    rms = float(np.sqrt(np.mean(r * r)))
    rho = float(np.corrcoef(r[:-1], r[1:])[0, 1]) if r.size > 3 and np.std(r) > 0 else 0.0
    infl = math.sqrt((1.0 + rho) / (1.0 - rho)) if 0.0 < rho < 0.99 else (1.0 if rho <= 0 else 10.0)
    warnings = list(warnings) + list(extra.get("notes", ()))
    if not out.success or out.nfev >= MAX_EVALUATIONS:
        warnings.append(f"the fit stopped after {out.nfev} evaluations without converging; "
                        "the model may not describe this trace")
    if not out.errorbars:
        warnings.append("standard errors could not be estimated (singular fit); parameters may be "
                        "poorly determined by this trace")
    if rho > 0.3:
        warnings.append(f"residuals are correlated (lag-1 {rho:.2f}): noise is band-limited or the model "
                        f"misses something; standard errors widened by {infl:.2f}x")
    if getattr(m, "rise_time_s", np.inf) < MIN_RISE_SAMPLES * m.sample_interval_s:
        warnings.append(f"the step rises within {m.rise_time_s / m.sample_interval_s:.2g} samples: the "
                        "record does not resolve its shape, so ζ and fn are not determined by it")
    ratio = rms / m.noise_v if m.noise_v > 0 else float("nan")
    if ratio > 1.5:
        warnings.append(f"residual rms is {ratio:.2g}x the noise of the flat part: the {model} model does "
                        "not describe the whole trace")
    params = []
    for p in out.params.values():
        se = float(p.stderr) * infl if p.stderr is not None and np.isfinite(p.stderr) else float("nan")
        params.append(Parameter(name=p.name, value=float(p.value), stderr=se, unit=_UNITS.get(p.name, "")))
    if model == "loop" and "pair_zeta" in v and not 0 < v["pair_zeta"] < 50:
        warnings.append("fitted pair ζ reached a bound")
    stats = {
        "rms_v": rms, "noise_v": float(m.noise_v), "rms_over_noise": ratio,
        "reduced_chi2": float(out.redchi), "points": int(keep.sum()),
        "excluded_points": int((~keep).sum()), "evaluations": int(out.nfev),
        "converged": bool(out.success), "residual_lag1": rho, "stderr_inflation": infl,
        "weight_sigma_v": float(sigma),
    }
    return StepFit(
        model=model, parameters=tuple(params), stats=stats, time_s=t.copy(), fitted_v=curve,
        loop_model=extra.get("loop_model"), warnings=tuple(warnings),
        provenance=Provenance(step="fit_step", sources=(source,) if source else (),
                              settings={"model": model, "channel": name}),
    )
