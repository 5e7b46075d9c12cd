"""Step-response figures and the predicted step-response result object.

:func:`step_metrics` follows the usual definitions: rise time from 10 % to
90 % of the change, settling time when the response last enters ±2 % of the
change around the final value, overshoot as a percentage of the change.
:class:`StepResponse` is what :mod:`benchfit.loop.timeresponse` returns for a
reference or load step (JSON round trip, provenance).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from benchfit.errors import InputError
from benchfit.fileio import as_float
from benchfit.provenance import Provenance


# ----------------------------------------------------------------------------- metrics
def _crossing_time(t, y, level, start=0) -> float:
    """First time at or after index ``start`` where y reaches ``level`` (interpolated)."""
    idx = np.flatnonzero(y[start:] >= level)
    if idx.size == 0:
        return math.nan
    i = start + int(idx[0])
    if i == 0 or y[i - 1] == y[i]:
        return float(t[i])
    return float(t[i - 1] + (level - y[i - 1]) / (y[i] - y[i - 1]) * (t[i] - t[i - 1]))


def step_metrics(t: np.ndarray, y: np.ndarray, final: float, *, initial: float = 0.0,
                 rise: tuple[float, float] = (0.1, 0.9), band: float = 0.02) -> dict[str, float]:
    """Overshoot, rise and settling time of a step response.

    Parameters
    ----------
    t, y
        Time (s) and response.
    final, initial
        Final and initial values (the change is ``final - initial``).
    rise
        Fractions of the change between which the rise time is measured.
    band
        Settling band as a fraction of the change.

    Returns
    -------
    dict
        ``overshoot_pct``, ``undershoot_pct``, ``rise_time_s``,
        ``settling_time_s`` (nan if the record ends outside the band),
        ``peak_value``, ``peak_time_s`` (refined by a parabola through the
        three samples around the highest one).
    """
    delta = final - initial
    if delta == 0 or not math.isfinite(delta):
        raise InputError(f"the step changes nothing (initial {initial}, final {final})")
    yn = (np.asarray(y, dtype=float) - initial) / delta
    j = int(np.argmax(yn))
    peak, tpk = float(yn[j]), float(t[j])
    if 0 < j < len(yn) - 1:     # parabola through the three samples around the peak
        y0, y1, y2 = yn[j - 1], yn[j], yn[j + 1]
        curv = y0 - 2 * y1 + y2
        if curv < 0 and np.isclose(t[j + 1] - t[j], t[j] - t[j - 1]):
            off = 0.5 * (y0 - y2) / curv
            peak = float(y1 - 0.25 * (y0 - y2) * off)
            tpk = float(t[j] + off * (t[j + 1] - t[j]))
    out = {
        "overshoot_pct": max(0.0, (peak - 1.0) * 100.0),
        "undershoot_pct": max(0.0, -float(np.min(yn)) * 100.0),
        "peak_value": initial + peak * delta,
        "peak_time_s": tpk,
    }
    out["rise_time_s"] = _crossing_time(t, yn, rise[1]) - _crossing_time(t, yn, rise[0])
    out["settling_time_s"] = settling_time(t, yn - 1.0, band)
    return out


def settling_time(t: np.ndarray, err: np.ndarray, band: float) -> float:
    """Time the normalised error last enters ±band (interpolated); nan if it ends outside."""
    outside = np.flatnonzero(np.abs(err) > band)
    if outside.size == 0:
        return float(t[0])
    i = int(outside[-1])
    if i == len(t) - 1:
        return math.nan
    a, b = abs(err[i]), abs(err[i + 1])
    frac = (a - band) / (a - b) if a != b else 0.0
    return float(t[i] + frac * (t[i + 1] - t[i]))


# ----------------------------------------------------------------------------- result
@dataclass(frozen=True, eq=False)
class StepResponse:
    """A predicted step response.

    Attributes
    ----------
    kind
        ``"reference"`` (output for a reference step) or ``"load"`` (output
        deviation for a load-current step).
    time_s, value
        The response (V for both kinds: output, or output deviation).
    step_size
        Reference step (V at the reference input) or load-current step (A).
    final_value
        Exact final value from the model (V).
    peak_value, peak_time_s
        Largest excursion (for a load step: largest deviation, either sign).
    overshoot_pct, undershoot_pct, rise_time_s
        Reference step only (nan for a load step).
    settling_time_s
        When the response last enters the settling band: ±band of the change
        (reference) or of the peak deviation from the final value (load).
    settle_band
        The band as a fraction.
    delay_s
        The loop delay simulated exactly.
    warnings, provenance
    """

    kind: str
    time_s: np.ndarray
    value: np.ndarray
    step_size: float
    final_value: float
    peak_value: float
    peak_time_s: float
    overshoot_pct: float
    undershoot_pct: float
    rise_time_s: float
    settling_time_s: float
    settle_band: float
    delay_s: float
    warnings: tuple[str, ...] = ()
    provenance: Provenance = field(default_factory=lambda: Provenance(step="step_response"))

    _FLOATS = ("step_size", "final_value", "peak_value", "peak_time_s", "overshoot_pct",
               "undershoot_pct", "rise_time_s", "settling_time_s", "settle_band", "delay_s")

    def to_dict(self) -> dict[str, Any]:
        d: dict[str, Any] = {"kind": "step_response", "step_kind": self.kind,
                             "time_s": np.asarray(self.time_s).tolist(),
                             "value": np.asarray(self.value).tolist()}
        for k in self._FLOATS:
            d[k] = float(getattr(self, k))
        d["warnings"] = list(self.warnings)
        d["provenance"] = self.provenance.to_dict()
        return d

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> StepResponse:
        if not isinstance(d, dict) or d.get("kind") != "step_response":
            raise InputError("expected a step-response object (kind 'step_response')")
        return cls(kind=str(d.get("step_kind", "reference")),
                   time_s=np.asarray(d["time_s"], dtype=float), value=np.asarray(d["value"], dtype=float),
                   warnings=tuple(d.get("warnings", ())), provenance=Provenance.from_dict(d.get("provenance")),
                   **{k: as_float(d.get(k)) for k in cls._FLOATS})
