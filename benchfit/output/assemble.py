"""Gather a report's inputs: predictions of the design and measured traces aligned to them."""

from __future__ import annotations

import math
from typing import Any

from benchfit.data.response import FrequencyResponse
from benchfit.data.trace import TimeTrace
from benchfit.fitting.model import PlantModel
from benchfit.fitting.result import FitResult
from benchfit.loop.design import Design
from benchfit.output.predicted import design_prediction, measured_step_curve, prediction_curves
from benchfit.output.report_inputs import ReportInputs
from benchfit.steps.analyse import analyse_load_step, analyse_step


def assemble(design: Design, *, fit: FitResult | None = None, sweep: FrequencyResponse | None = None,
             step_trace: TimeTrace | None = None, step_channel: str | None = None,
             zout: FrequencyResponse | None = None, zout_model: PlantModel | None = None,
             load_trace: TimeTrace | None = None, load_channel: str | None = None,
             load_step_a: float | None = None, reference_step_v: float | None = None,
             title: str | None = None, settings: dict[str, Any] | None = None,
             notes: tuple[str, ...] = ()) -> ReportInputs:
    """Predict the design's time and impedance responses and bundle everything for a report.

    Parameters
    ----------
    design
        The design.
    fit, sweep
        The plant fit and the measured plant sweep.
    step_trace, step_channel
        A measured reference step and the channel with the output.  It is
        analysed (:func:`benchfit.steps.analyse.analyse_step`), and the
        predicted step is made the same size at the output so both overlay.
    zout, zout_model
        Measured open-loop output impedance (sweep) and/or a model of it; a
        model is needed for the load step.
    load_trace, load_channel, load_step_a
        A measured load step (output deviation channel) and its current step, A.
    reference_step_v
        Reference step at the reference input, V (default: from the measured
        step, else 1 V).
    title, settings, notes
        Report title, extra settings to list, paragraphs for the time section.
    """
    step = analyse_step(step_trace, channel=step_channel) if step_trace is not None else None
    beta = design.sensing.gain
    if reference_step_v is None:
        sv = step.measurement.step_v if step is not None else math.nan
        reference_step_v = sv * beta if math.isfinite(sv) and sv != 0 else 1.0
    z_open = zout_model if zout_model is not None else zout
    pred = design_prediction(design, reference_step_v=reference_step_v, z_open=z_open,
                             load_step_a=load_step_a if zout_model is not None else None)
    if zout_model is not None and zout is not None:
        # the impedance picture shows the measured sweep's own points
        imp = design_prediction(design, z_open=zout).impedance
        pred = type(pred)(**{**pred.__dict__, "impedance": imp})
    curves = prediction_curves(pred, "snapped", design.snapped.loops[0])
    if step is not None:
        curves["step_measured"] = measured_step_curve(step_trace, step_channel, step)
    if load_trace is not None:
        ls = analyse_load_step(load_trace, channel=load_channel, current_step_a=load_step_a)
        curves["load_measured"] = measured_step_curve(load_trace, load_channel, ls)
    return ReportInputs(design=design, fit=fit, sweep=sweep, step_trace=step_trace, step_channel=step_channel,
                        step=step, curves=curves, zout=zout, title=title, settings=settings,
                        notes=tuple(notes))
