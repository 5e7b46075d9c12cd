"""Measured step vs the loop's prediction, side by side.

The prediction is measured with the same code as the trace (same definitions,
same step instant), so the rows compare like with like.  The loop gain comes
from a design JSON read as plain data (``loop_model.snapped``, or ``ideal``),
or from any JSON holding a PlantModel; the loop layer is not imported.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np

from benchfit.data.response import FrequencyResponse
from benchfit.errors import InputError
from benchfit.fileio import as_float, read_json
from benchfit.fitting.model import PlantModel
from benchfit.provenance import Provenance
from benchfit.steps.features import trace_arrays
from benchfit.steps.loadstep import measure_load_step, predict_load_step
from benchfit.steps.measure import measure_step
from benchfit.steps.models import closed_loop_unit_step
from benchfit.steps.pm import PhaseMarginEstimate


@dataclass(frozen=True, eq=False)
class Comparison:
    """Rows of measured vs predicted figures, and the predicted curve.

    Parameters
    ----------
    against
        What the prediction came from (e.g. "design loop gain (snapped)").
    rows
        Dicts with ``quantity``, ``unit``, ``measured``, ``predicted`` (NaN when unknown).
    time_s, predicted_v
        The predicted trace on the measured trace's time axis.
    warnings, provenance
        As everywhere.
    """

    against: str
    rows: tuple[dict[str, Any], ...]
    time_s: np.ndarray
    predicted_v: np.ndarray
    warnings: tuple[str, ...] = ()
    provenance: Provenance = field(default_factory=lambda: Provenance(step="compare"))

    def row(self, quantity: str) -> dict[str, Any]:
        for r in self.rows:
            if r["quantity"] == quantity:
                return r
        raise KeyError(quantity)

    def to_dict(self, include_curve: bool = True) -> dict[str, Any]:
        d = {"kind": "step_comparison", "against": self.against, "rows": [dict(r) for r in self.rows],
             "warnings": list(self.warnings), "provenance": self.provenance.to_dict()}
        if include_curve:
            d["curve"] = {"time_s": self.time_s.tolist(), "predicted_v": self.predicted_v.tolist()}
        return d

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> Comparison:
        curve = d.get("curve") or {"time_s": [], "predicted_v": []}
        rows = tuple({"quantity": str(r["quantity"]), "unit": str(r.get("unit", "")),
                      "measured": as_float(r.get("measured")), "predicted": as_float(r.get("predicted"))}
                     for r in d.get("rows", ()))
        return cls(against=str(d.get("against", "")), rows=rows,
                   time_s=np.asarray([as_float(v) for v in curve["time_s"]], float),
                   predicted_v=np.asarray([as_float(v) for v in curve["predicted_v"]], float),
                   warnings=tuple(d.get("warnings", ())), provenance=Provenance.from_dict(d.get("provenance")))


def read_loop_gain(path) -> tuple[PlantModel, dict[str, Any] | None, str]:
    """Loop gain T (PlantModel), predicted margins (dict or None) and a label from a JSON file.

    Accepts a design JSON (``"kind": "design"``: its ``loop_model.snapped`` or
    ``ideal``, and ``predicted`` of the same) or a JSON holding a model
    (a PlantModel or a fit result).
    """
    d = read_json(path)
    try:
        if d.get("kind") == "design":
            lm = d.get("loop_model") or {}
            which = "snapped" if lm.get("snapped") else "ideal" if lm.get("ideal") else None
            if which is None:
                raise InputError("the design holds a measured loop (loop_data), not a loop model; fit the "
                                 "plant first so the design carries a model of the loop gain")
            pred = (d.get("predicted") or {}).get(which)
            return PlantModel.from_dict(lm[which]), pred if isinstance(pred, dict) else None, \
                f"design loop gain ({which})"
        return PlantModel.from_dict(d), None, "loop gain model"
    except InputError as e:
        if e.source is None:
            raise InputError(e.message, source=str(path)) from None
        raise
    except (KeyError, TypeError, ValueError, AttributeError, IndexError) as e:
        raise InputError(f"loop file is incomplete or malformed ({type(e).__name__}: {e})",
                         source=str(path)) from None


def _row(q, unit, measured, predicted):
    return {"quantity": q, "unit": unit, "measured": float(measured), "predicted": float(predicted)}


def compare_step_with_loop(data, loop: PlantModel, step_time_s: float, *, channel=None, band: float = 0.02,
                           predicted_margins: dict[str, Any] | None = None,
                           pm_estimate: PhaseMarginEstimate | None = None,
                           against: str = "loop gain") -> Comparison:
    """Measure the trace and the closed-loop prediction T/(1+T) with one step instant.

    Parameters
    ----------
    data
        The trace (TimeTrace or ``(t, y)``).
    loop
        Loop gain T.
    step_time_s
        Step instant used for both (the fitted t0 is best).
    predicted_margins
        The loop's predicted margins (``phase_margin_deg``, ``crossover_hz``), when known.
    pm_estimate
        Phase margin estimated from the step, for the margin row.
    """
    t, y, _, source = trace_arrays(data, channel)
    warnings: list[str] = []
    meas = measure_step((t, y), step_time_s=step_time_s, band=band)
    u, _ = closed_loop_unit_step(t - step_time_s, loop)
    pred_v = meas.initial_v + meas.step_v * u
    try:
        pred = measure_step((t, pred_v), step_time_s=step_time_s, band=band)
    except InputError as e:
        pred = None
        warnings.append(f"the predicted step could not be measured on this record: {e.message}")
    rows = []
    for q, unit in (("overshoot_pct", "%"), ("ringing_freq_hz", "Hz"), ("rise_time_s", "s"),
                    ("peak_time_s", "s"), ("settling_time_s", "s")):
        rows.append(_row(q, unit, getattr(meas, q), getattr(pred, q) if pred else np.nan))
    pm = predicted_margins or {}
    if pm_estimate is not None or pm:
        rows.append(_row("phase_margin_deg", "deg",
                         pm_estimate.phase_margin_deg if pm_estimate else np.nan,
                         as_float(pm.get("phase_margin_deg"))))
        rows.append(_row("crossover_hz", "Hz", pm_estimate.crossover_hz if pm_estimate else np.nan,
                         as_float(pm.get("crossover_hz"))))
    return Comparison(against=against, rows=tuple(rows), time_s=t, predicted_v=pred_v,
                      warnings=tuple(warnings),
                      provenance=Provenance(step="compare_step_with_loop", sources=(source,) if source else (),
                                            settings={"step_time_s": step_time_s, "band": band,
                                                      "against": against}))


def compare_load_step_with_zout(data, zout: PlantModel | FrequencyResponse, current_step_a: float, *,
                                channel=None, band: float = 0.02, band_v: float | None = None,
                                step_time_s: float | None = None,
                                against: str = "closed-loop output impedance") -> Comparison:
    """Measure a load-step trace and the prediction v0 − ΔI·z(t − t_s) from Zcl the same way."""
    t, y, _, source = trace_arrays(data, channel)
    meas = measure_load_step((t, y), band=band, band_v=band_v, step_time_s=step_time_s,
                             current_step_a=current_step_a)
    pred_v = predict_load_step(t, zout, current_step_a, meas.initial_v, meas.step_time_s)
    warnings: list[str] = []
    try:
        pred = measure_load_step((t, pred_v), band_v=meas.band_v, step_time_s=meas.step_time_s,
                                 current_step_a=current_step_a)
    except InputError as e:
        pred = None
        warnings.append(f"the predicted load step could not be measured on this record: {e.message}")
    rows = [_row(q, unit, getattr(meas, q), getattr(pred, q) if pred else np.nan)
            for q, unit in (("deviation_v", "V"), ("peak_time_s", "s"), ("recovery_time_s", "s"),
                            ("ringing_freq_hz", "Hz"), ("shift_v", "V"))]
    return Comparison(against=against, rows=tuple(rows), time_s=t, predicted_v=pred_v,
                      warnings=tuple(warnings),
                      provenance=Provenance(step="compare_load_step_with_zout",
                                            sources=(source,) if source else (),
                                            settings={"current_step_a": current_step_a, "band": band,
                                                      "band_v": band_v, "against": against}))
