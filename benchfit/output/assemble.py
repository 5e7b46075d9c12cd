"""Gather a report's inputs: predictions of the design and measured traces aligned to them."""

from __future__ import annotations

import math
from pathlib import Path
from typing import Any

from benchfit.data.response import FrequencyResponse
from benchfit.data.trace import TimeTrace
from benchfit.errors import InputError
from benchfit.fitting.model import PlantModel
from benchfit.fitting.result import FitResult
from benchfit.loop.design import Design
from benchfit.numfmt import eng
from benchfit.output.predicted import design_prediction, measured_step_curve, prediction_curves
from benchfit.output.report_inputs import ReportInputs
from benchfit.steps.analyse import analyse_load_step, analyse_step
from benchfit.steps.measure import measure_step


def _name(trace: TimeTrace) -> str:
    return ", ".join(Path(s).name for s in trace.provenance.sources) or "the trace"


def load_step_size(load_trace: TimeTrace | None, current_channel: str | None,
                   load_step_a: float | None) -> tuple[float | None, str]:
    """The load-current step the prediction is made for, and where it came from.

    The prediction must be the size of the measured stimulus, or a reader
    compares a dip with one of another size.  Evidence weighed, in order:

    * a current channel of the measured load-step trace: its step (measured
      like a reference step) is the size;
    * the size given (``--load-step``), for a trace without a current channel
      or with no trace at all;
    * nothing: no load-step prediction (``None``).

    Raises
    ------
    InputError
        Both a current channel and a size were given (they would compete), or
        the current channel shows no step.
    """
    if load_trace is not None and current_channel is not None:
        if load_step_a is not None:
            raise InputError("give the load step size or the trace's current channel, not both",
                             source="--load-step")
        try:
            di = float(measure_step(load_trace, channel=current_channel).step_v)
        except InputError as e:
            raise InputError(e.message, source="--load-current-channel") from None
        if not (math.isfinite(di) and di != 0):
            raise InputError(f"channel {current_channel!r} of {_name(load_trace)} shows no current step",
                             source="--load-current-channel")
        return di, f"the current step measured on {current_channel} of {_name(load_trace)}"
    if load_step_a is None:
        return None, ""
    if load_trace is not None:
        return float(load_step_a), "as given (no current channel of the trace was named to measure it on)"
    return float(load_step_a), "as given"


def assemble(design: Design, *, fit: FitResult | None = None, sweep: FrequencyResponse | None = None,
             step_trace: TimeTrace | None = None, step_channel: str | None = None,
             zout: FrequencyResponse | None = None, zout_model: PlantModel | None = None,
             load_trace: TimeTrace | None = None, load_channel: str | None = None,
             load_current_channel: str | None = None,
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
    load_trace, load_channel
        A measured load step and the channel with the output deviation.
    load_current_channel, load_step_a
        The trace's channel with the load current, or the current step in A
        (:func:`load_step_size` picks the prediction's size from them).
    reference_step_v
        Reference step at the reference input, V (default: from the measured
        step, else 1 V).
    title, settings, notes
        Report title, extra settings to list, paragraphs for the time section.
    """
    step = analyse_step(step_trace, channel=step_channel) if step_trace is not None else None
    beta = design.sensing.gain
    stimuli: dict[str, str] = {}
    if reference_step_v is None:
        sv = step.measurement.step_v if step is not None else math.nan
        if math.isfinite(sv) and sv != 0:
            reference_step_v = sv * beta
            stimuli["reference"] = (f"{eng(sv, 'V')} at the output ({eng(reference_step_v, 'V')} at the "
                                    f"reference input), the step measured on {step.measurement.channel} "
                                    f"of {_name(step_trace)}")
        else:
            reference_step_v = 1.0
            stimuli["reference"] = "1 V at the reference input (no measured step to match)"
    else:
        stimuli["reference"] = f"{eng(reference_step_v, 'V')} at the reference input, as given"
    load_a, load_src = load_step_size(load_trace, load_current_channel, load_step_a)
    if load_a is not None:
        stimuli["load"] = f"{eng(load_a, 'A')}, {load_src}"
    z_open = zout_model if zout_model is not None else zout
    pred = design_prediction(design, reference_step_v=reference_step_v, z_open=z_open,
                             load_step_a=load_a if zout_model is not None else None)
    if zout_model is not None and zout is not None:
        # the impedance picture shows the measured sweep's own points
        imp = design_prediction(design, z_open=zout).impedance
        pred = type(pred)(**{**pred.__dict__, "impedance": imp})
    curves = prediction_curves(pred, "snapped", design.snapped.loops[0])
    if step is not None:
        curves["step_measured"] = measured_step_curve(step_trace, step_channel, step)
    ls = None
    if load_trace is not None:
        ls = analyse_load_step(load_trace, channel=load_channel, current_step_a=load_a)
        curves["load_measured"] = measured_step_curve(load_trace, load_channel, ls)
    return ReportInputs(design=design, fit=fit, sweep=sweep, step_trace=step_trace, step_channel=step_channel,
                        step=step, curves=curves, zout=zout, title=title, settings=settings,
                        notes=tuple(notes), load_trace=load_trace, load_channel=load_channel, load_step=ls,
                        stimuli=stimuli)
