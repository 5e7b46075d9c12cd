"""Everything benchfit predicts for a loop, in one call.

The pieces live in :mod:`benchfit.loop.margins` (margins),
:mod:`benchfit.loop.closedloop` (closed loop, output impedance) and
:mod:`benchfit.loop.timeresponse` (reference and load steps with exact
delay); this module re-exports them and gathers them into a
:class:`Prediction`.  A loop given as measured data gets the
frequency-domain predictions; the time responses need a model.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

from benchfit import numfmt
from benchfit.data.response import FrequencyResponse
from benchfit.errors import InputError
from benchfit.fitting.model import PlantModel
from benchfit.loop.closedloop import ClosedLoop, OutputImpedance, closed_loop, output_impedance
from benchfit.loop.margins import Margins, margins_of_model, margins_of_sweep
from benchfit.loop.stepresponse import StepResponse, step_metrics
from benchfit.loop.timeresponse import load_step, reference_step
from benchfit.provenance import Provenance

__all__ = [
    "ClosedLoop", "OutputImpedance", "StepResponse", "Prediction",
    "closed_loop", "output_impedance", "reference_step", "load_step", "step_metrics", "predict",
]


@dataclass(frozen=True, eq=False)
class Prediction:
    """Margins, closed loop, reference step, output impedance and load step of one loop.

    ``step``, ``impedance`` and ``load`` are None when they could not be
    predicted (no model, no impedance given); ``warnings`` says why.
    """

    margins: Margins
    closed: ClosedLoop
    step: StepResponse | None = None
    impedance: OutputImpedance | None = None
    load: StepResponse | None = None
    warnings: tuple[str, ...] = ()
    provenance: Provenance = field(default_factory=lambda: Provenance(step="predict"))

    def to_dict(self) -> dict[str, Any]:
        def opt(x):
            return None if x is None else x.to_dict()

        return {"kind": "prediction", "margins": self.margins.to_dict(),
                "closed_loop": self.closed.to_dict(), "step": opt(self.step),
                "output_impedance": opt(self.impedance), "load_step": opt(self.load),
                "warnings": list(self.warnings), "provenance": self.provenance.to_dict()}

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> Prediction:
        if not isinstance(d, dict) or d.get("kind") != "prediction":
            raise InputError("expected a prediction object (kind 'prediction')")

        def opt(key, typ):
            return None if d.get(key) is None else typ.from_dict(d[key])

        return cls(margins=Margins.from_dict(d["margins"]),
                   closed=ClosedLoop.from_dict(d["closed_loop"]),
                   step=opt("step", StepResponse), impedance=opt("output_impedance", OutputImpedance),
                   load=opt("load_step", StepResponse), warnings=tuple(d.get("warnings", ())),
                   provenance=Provenance.from_dict(d.get("provenance")))

    def report(self) -> str:
        """Plain-text summary of every prediction."""
        lines = [self.margins.report(), ""]
        c = self.closed
        lines.append(f"closed-loop bandwidth  {_n(c.bandwidth_hz, 'Hz')}  (-3 dB from "
                     f"{numfmt.sig(c.low_freq_gain)} V/V), peaking {numfmt.db(c.peaking_db)}")
        if self.step is not None:
            s = self.step
            lines.append(f"reference step  overshoot {numfmt.sig(s.overshoot_pct)} %, rise {_n(s.rise_time_s, 's')}, "
                         f"settling ({numfmt.sig(s.settle_band * 100)} %) {_n(s.settling_time_s, 's')}")
        if self.impedance is not None:
            z = self.impedance
            lines.append(f"output impedance  peak {_n(z.peak_ohm, 'Ω')} at {_n(z.peak_freq_hz, 'Hz')}")
        if self.load is not None:
            ld = self.load
            lines.append(f"load step {_n(ld.step_size, 'A')}  peak deviation {_n(ld.peak_value, 'V')} at "
                         f"{_n(ld.peak_time_s, 's')}, recovery {_n(ld.settling_time_s, 's')}")
        for w in self.warnings:
            lines.append(f"warning: {w}")
        return "\n".join(lines)


def _n(v: float, unit: str) -> str:
    return numfmt.NOT_DEFINED if not math.isfinite(v) else numfmt.eng(v, unit)


def predict(loop: PlantModel | FrequencyResponse, *, sensing_gain: float = 1.0,
            reference_step_v: float = 1.0, z_open: PlantModel | FrequencyResponse | None = None,
            load_step_a: float | None = None,
            unstable_open_loop_poles: int | None = None) -> Prediction:
    """Predict margins, closed loop, step, output impedance and load step.

    Parameters
    ----------
    loop
        Loop gain T (return ratio) as a model or a measured sweep.
    sensing_gain
        β = V_feedback / V_out.
    reference_step_v
        Reference step size (V at the reference input).
    z_open
        Open-loop output impedance (ohm), model or sweep; enables the output
        impedance (and, with ``load_step_a`` and models, the load step).
    load_step_a
        Load-current step, A.
    unstable_open_loop_poles
        P for the Nyquist count (counted from the model when None; 0 for data).

    Returns
    -------
    Prediction
    """
    warnings: list[str] = []
    if isinstance(loop, PlantModel):
        margins = margins_of_model(loop, unstable_open_loop_poles=unstable_open_loop_poles)
    elif isinstance(loop, FrequencyResponse):
        margins = margins_of_sweep(loop, unstable_open_loop_poles=unstable_open_loop_poles or 0)
    else:
        raise InputError(f"the loop must be a model or a sweep, found {type(loop).__name__}")
    closed = closed_loop(loop, sensing_gain=sensing_gain)
    step = None
    if isinstance(loop, PlantModel):
        step = reference_step(loop, sensing_gain=sensing_gain, step=reference_step_v)
    else:
        warnings.append("no step response: the loop is measured data; fit a model to predict it")
    imp = output_impedance(z_open, loop) if z_open is not None else None
    load = None
    if load_step_a is not None:
        if isinstance(z_open, PlantModel) and isinstance(loop, PlantModel):
            load = load_step(z_open, loop, current_step_a=load_step_a)
        else:
            warnings.append("no load step: it needs models of both the loop and the open-loop impedance")
    parents = tuple(x.provenance.to_dict() for x in (loop, z_open) if x is not None)
    return Prediction(margins=margins, closed=closed, step=step, impedance=imp, load=load,
                      warnings=tuple(warnings),
                      provenance=Provenance(step="predict", parents=parents,
                                            settings={"sensing_gain": sensing_gain,
                                                      "reference_step_v": reference_step_v,
                                                      "load_step_a": load_step_a}))
