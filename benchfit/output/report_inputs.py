"""What a report is made of: the design plus whatever else the job produced."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from benchfit.data.response import FrequencyResponse
from benchfit.data.trace import TimeTrace
from benchfit.fitting.result import FitResult
from benchfit.loop.design import Design
from benchfit.output.curves import Curve


@dataclass(frozen=True, eq=False)
class ReportInputs:
    """Everything one report shows; only ``design`` is required.

    Parameters
    ----------
    design
        The compensation design (parts, predictions, spread, warnings).
    fit
        The plant fit the design was made from (parameter table, fit report).
    sweep
        The measured plant sweep (for the measured-vs-model picture).
    step_trace, step_channel
        A measured step trace and the channel holding the output.
    step
        Result of the step analysis (:class:`benchfit.steps.result.StepResult`
        or a :class:`benchfit.steps.fit.StepFit`), shown as a table.
    curves
        Predicted curves by name: ``loop``, ``closed``, ``step``,
        ``load_step``, ``zout_open``, ``zout_closed``, ``step_measured``.
    zout
        Measured open-loop output impedance.
    title
        Report title.
    settings
        Extra settings to list under the inputs (name -> value).
    notes
        Paragraphs shown with the time responses (e.g. what the measured
        traces are of).
    load_trace, load_channel, load_step
        A measured load step, the channel with the output deviation and its
        analysis (:class:`benchfit.steps.result.StepResult`).
    stimuli
        Words saying what size each predicted step is and where that size
        came from (``reference``, ``load``), for the captions.
    """

    design: Design
    fit: FitResult | None = None
    sweep: FrequencyResponse | None = None
    step_trace: TimeTrace | None = None
    step_channel: str | None = None
    step: Any = None
    curves: dict[str, Curve] | None = None
    zout: FrequencyResponse | None = None
    title: str | None = None
    settings: dict[str, Any] | None = None
    notes: tuple[str, ...] = ()
    load_trace: TimeTrace | None = None
    load_channel: str | None = None
    load_step: Any = None
    stimuli: dict[str, str] | None = None

    def curve(self, name: str) -> Curve | None:
        return (self.curves or {}).get(name)
