"""StepResult: everything benchfit learned from one step or load-step trace."""

from __future__ import annotations

import math
import os
from dataclasses import dataclass, field
from typing import Any

from benchfit import numfmt
from benchfit.errors import InputError
from benchfit.fileio import read_json, write_json_atomic
from benchfit.provenance import Provenance
from benchfit.steps.compare import Comparison
from benchfit.steps.loadstep import LoadStepMeasurement
from benchfit.steps.measure import StepMeasurement
from benchfit.steps.pm import RULE_OF_THUMB_NOTE, PhaseMarginEstimate
from benchfit.steps.stepfit import StepFit

MODES = ("step", "load_step")
_NAN = float("nan")


@dataclass(frozen=True, eq=False)
class StepResult:
    """Measurements, fits, phase-margin estimate and comparison for one trace.

    Parameters
    ----------
    mode
        ``"step"`` (reference step) or ``"load_step"``.
    measurement
        Model-free measurements.
    fits
        Fitted models; for a step the first is always the second-order fit (the
        basis of ζ and of the phase-margin estimate).
    phase_margin
        Phase margin estimated from ζ (None when there is no ζ).
    comparison
        Measured vs predicted rows (None without a prediction).
    warnings
        Everything the user should know, gathered from all parts.
    provenance
        Source and settings.
    """

    mode: str
    measurement: StepMeasurement | LoadStepMeasurement
    fits: tuple[StepFit, ...] = ()
    phase_margin: PhaseMarginEstimate | None = None
    comparison: Comparison | None = None
    warnings: tuple[str, ...] = ()
    provenance: Provenance = field(default_factory=lambda: Provenance(step="step"))

    def __post_init__(self) -> None:
        if self.mode not in MODES:
            raise InputError(f"mode {self.mode!r} unknown; expected one of {MODES}")

    def fit(self, model: str) -> StepFit | None:
        """The fit of ``model``, or None."""
        return next((f for f in self.fits if f.model == model), None)

    # ----- the flat figures ---------------------------------------------------------
    def summary(self) -> dict[str, Any]:
        """Flat key → value figures (SI units in the key names)."""
        m = self.measurement
        pm = self.phase_margin
        out: dict[str, Any] = {
            "mode": self.mode,
            "zeta": pm.zeta if pm else _NAN,
            "zeta_stderr": pm.zeta_stderr if pm else _NAN,
            "phase_margin_estimate_deg": pm.phase_margin_deg if pm else _NAN,
            "phase_margin_estimate_stderr_deg": pm.phase_margin_stderr_deg if pm else _NAN,
            "phase_margin_rule_of_thumb_deg": pm.rule_of_thumb_deg if pm else _NAN,
            "initial_v": m.initial_v, "final_v": m.final_v, "step_time_s": m.step_time_s,
            "peak_time_s": m.peak_time_s, "ringing_freq_hz": m.ringing_freq_hz,
            "log_decrement": m.log_decrement, "noise_v": m.noise_v,
        }
        if isinstance(m, StepMeasurement):
            so = self.fit("second-order")
            out.update(
                natural_freq_hz=so.value("fn_hz") if so else _NAN,
                natural_freq_stderr_hz=so.stderr("fn_hz") if so else _NAN,
                step_v=m.step_v, overshoot_pct=m.overshoot_pct, undershoot_pct=m.undershoot_pct,
                rise_time_s=m.rise_time_s, settling_time_s=m.settling_time_s, band=m.band,
                fit_rms_over_noise=so.stats["rms_over_noise"] if so else _NAN,
            )
        else:
            ls = self.fit("load-step")
            di = m.current_step_a
            out.update(shift_v=m.shift_v, deviation_v=m.deviation_v, recovery_time_s=m.recovery_time_s,
                       band_v=m.band_v, current_step_a=di, peak_impedance_ohm=m.peak_impedance_ohm,
                       natural_freq_hz=ls.value("fn_hz") if ls else
                       _NAN if not math.isfinite(m.ringing_freq_hz) or not pm else
                       m.ringing_freq_hz / math.sqrt(max(1.0 - pm.zeta ** 2, 1e-12)),
                       natural_freq_stderr_hz=ls.stderr("fn_hz") if ls else _NAN,
                       # Zcl = (R_dc·ωn² + R_p·2ζωn·s)/(s² + 2ζωn s + ωn²) of the load-step fit
                       zcl_resonant_ohm=-ls.value("resonant_v") / di if ls and di else _NAN,
                       zcl_dc_ohm=-ls.value("droop_v") / di if ls and di else _NAN,
                       fit_rms_over_noise=ls.stats["rms_over_noise"] if ls else _NAN)
        return out

    # ----- JSON ----------------------------------------------------------------------
    def to_dict(self, include_curves: bool = True) -> dict[str, Any]:
        d: dict[str, Any] = {"kind": "step_result"}
        d.update(self.summary())
        d.update(
            measurement=self.measurement.to_dict(),
            fits=[f.to_dict(include_curve=include_curves) for f in self.fits],
            phase_margin=self.phase_margin.to_dict() if self.phase_margin else None,
            comparison=self.comparison.to_dict(include_curve=include_curves) if self.comparison else None,
            warnings=list(self.warnings),
            provenance=self.provenance.to_dict(),
        )
        return d

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> StepResult:
        if not isinstance(d, dict) or d.get("kind") != "step_result":
            raise InputError("expected a step result (\"kind\": \"step_result\")")
        mode = str(d.get("mode", "step"))
        try:
            md = d["measurement"]
        except KeyError:
            raise InputError("step result has no 'measurement'") from None
        meas = StepMeasurement.from_dict(md) if mode == "step" else LoadStepMeasurement.from_dict(md)
        return cls(
            mode=mode, measurement=meas,
            fits=tuple(StepFit.from_dict(f) for f in d.get("fits", ())),
            phase_margin=PhaseMarginEstimate.from_dict(d["phase_margin"]) if d.get("phase_margin") else None,
            comparison=Comparison.from_dict(d["comparison"]) if d.get("comparison") else None,
            warnings=tuple(d.get("warnings", ())),
            provenance=Provenance.from_dict(d.get("provenance")),
        )

    def to_json(self, path: str | os.PathLike) -> None:
        write_json_atomic(path, self.to_dict())

    @classmethod
    def from_json(cls, path: str | os.PathLike) -> StepResult:
        try:
            return cls.from_dict(read_json(path))
        except InputError as e:
            if e.source is None:
                raise InputError(e.message, source=str(path)) from None
            raise

    # ----- text -------------------------------------------------------------------------
    def report(self) -> str:
        """A plain-text report: measurements, fits with ±σ, margin estimate, comparison."""
        m = self.measurement
        src = ", ".join(self.provenance.sources) or "in memory"
        lines = [f"{'Load step' if self.mode == 'load_step' else 'Step'}: {src}, channel {m.channel}, "
                 f"{m.samples} samples at {_si(m.sample_interval_s, 's')}", "", "Measured (model-free)"]
        rows = [("initial level", _si(m.initial_v, "V")), ("final level", _si(m.final_v, "V"))]
        if isinstance(m, StepMeasurement):
            rows += [("step", _si(m.step_v, "V")), ("step instant", _instant(m)),
                     ("overshoot", _si(m.overshoot_pct, "%")), ("undershoot", _si(m.undershoot_pct, "%")),
                     ("rise time 10-90 %", _si(m.rise_time_s, "s")), ("peak time", _si(m.peak_time_s, "s")),
                     (f"settling time ±{numfmt.sig(100 * m.band)} %", _si(m.settling_time_s, "s"))]
        else:
            rows += [("level shift", _si(m.shift_v, "V")), ("step instant", _instant(m)),
                     ("peak deviation", _si(m.deviation_v, "V")), ("time of peak", _si(m.peak_time_s, "s")),
                     (f"recovery time ±{_si(m.band_v, 'V')}", _si(m.recovery_time_s, "s"))]
            if math.isfinite(m.current_step_a):
                rows += [("load step", _si(m.current_step_a, "A")),
                         ("peak |dV|/|dI|", _si(m.peak_impedance_ohm, "ohm"))]
        ring_f, ring_dec = _ringing_text(m.ringing_freq_hz, m.log_decrement, m.lobes)
        rows += [("ringing frequency", ring_f), ("log decrement", ring_dec),
                 ("noise (1 sigma)", f"{_si(m.noise_v, 'V')} from {m.noise_source}")]
        lines += [f"  {k:<24} {v}" for k, v in rows]
        for f in self.fits:
            lines += ["", f"Fit: {f.model} (residual rms {_si(f.stats['rms_v'], 'V')} = "
                          f"{f.stats['rms_over_noise']:.3g}x noise, {f.stats['points']} points)"]
            for p in f.parameters:
                lines.append(f"  {STEP_PARAMETER_LABELS.get(p.name, p.name):<24} {_pm(p.value, p.stderr, p.unit)}"
                             f"  {p.name}")
        if self.phase_margin:
            pm = self.phase_margin
            basis = "fitted ζ" if self.fits else "ζ of the log decrement"
            if not pm.determined:
                lines += ["", f"Phase margin estimated from the {basis}",
                          f"  {'phase margin':<24} not determined: {pm.not_determined}"]
            else:
                lines += ["", f"Phase margin estimated from the {basis}",
                          f"  {'exact second order':<24} {numfmt.deg(pm.phase_margin_deg)} ± "
                          f"{numfmt.deg(pm.phase_margin_stderr_deg)} (crossover {_si(pm.crossover_hz, 'Hz')})",
                          f"  {'100·ζ':<24} {numfmt.deg(pm.rule_of_thumb_deg)}  [{RULE_OF_THUMB_NOTE}]"]
        if self.comparison:
            c = self.comparison
            lines += ["", f"Measured vs predicted ({c.against})",
                      f"  {'quantity':<24} {'measured':>12} {'predicted':>12}"]
            for r in c.rows:
                lines.append(f"  {r['quantity']:<24} {_si(r['measured'], r['unit']):>12} "
                             f"{_si(r['predicted'], r['unit']):>12}")
        if self.warnings:
            lines += ["", "Warnings"] + [f"  - {w}" for w in self.warnings]
        return "\n".join(lines) + "\n"


#: What a person reads for each step-model parameter (JSON keeps the names; the text shows both).
STEP_PARAMETER_LABELS = {"zeta": "damping ratio ζ", "fn_hz": "natural frequency", "fp_hz": "real pole",
                         "initial_v": "initial level", "step_v": "step", "t0_s": "step instant",
                         "droop_v": "droop (DC part)", "resonant_v": "resonant dip",
                         "loop_gain": "loop gain", "pair_fn_hz": "pole pair, natural frequency",
                         "pair_zeta": "pole pair, damping ratio"}


def _si(x: float, unit: str) -> str:
    """A measured figure in the one number format (:mod:`benchfit.numfmt`), 'not defined' for NaN."""
    if x is None or not math.isfinite(x):
        return numfmt.NOT_DEFINED
    return numfmt.quantity(x + 0.0, unit)   # + 0.0 turns -0 into 0


def _instant(m) -> str:
    """The step instant: found from the trace it is a sample time, so known to the sample
    interval; given by the user (--step-time) it is printed as given."""
    t_s = m.step_time_s
    if t_s is None or not math.isfinite(t_s):
        return numfmt.NOT_DEFINED
    if m.provenance.settings.get("step_time_s") is not None:
        return _si(t_s, "s")
    return numfmt.eng(numfmt.to_resolution(t_s, m.sample_interval_s), "s")


def _ringing_text(freq_hz: float, log_decrement: float, lobes: int) -> tuple[str, str]:
    """The ringing rows, with what is not defined said in words (the decrement needs two lobes)."""
    if not math.isfinite(freq_hz):
        freq = (f"not defined: {'no' if lobes == 0 else 'only ' + str(lobes)} ringing lobe"
                f"{'s' * (lobes != 1)} above the noise")
    else:
        freq = _si(freq_hz, "Hz")
    if math.isfinite(log_decrement):
        dec = f"{numfmt.sig(log_decrement)} (from {lobes} lobes)"
    else:
        dec = (f"not defined: {'no' if lobes == 0 else 'only ' + str(lobes)} ringing lobe"
               f"{'s' * (lobes != 1)} above the noise; it needs two")
    return freq, dec


def _pm(value: float, stderr: float, unit: str) -> str:
    if unit in ("", "%", "deg"):
        return f"{numfmt.sig(value, numfmt.FIT_DIGITS)} ± {numfmt.sig(stderr, 2)} {numfmt.unit_symbol(unit)}".rstrip()
    return f"{_si(value, unit)} ± {numfmt.eng(stderr, unit, 2)}"
