"""One call from a trace to a :class:`StepResult`: measure, fit, estimate, compare."""

from __future__ import annotations

import math

from benchfit.data.response import FrequencyResponse
from benchfit.data.trace import TimeTrace
from benchfit.errors import InputError
from benchfit.fitting.model import PlantModel
from benchfit.provenance import Provenance
from benchfit.steps.compare import compare_load_step_with_zout, compare_step_with_loop
from benchfit.steps.features import trace_arrays
from benchfit.steps.fit import MODELS, fit_load_step, fit_step
from benchfit.steps.loadstep import measure_load_step
from benchfit.steps.measure import measure_step
from benchfit.steps.pm import estimate_phase_margin, zeta_not_determined
from benchfit.steps.result import StepResult


def analyse_step(data, *, channel: str | int | None = None, model: str = "second-order",
                 loop: PlantModel | None = None, loop_label: str = "loop gain",
                 predicted_margins: dict | None = None, band: float = 0.02, band_v: float | None = None,
                 step_time_s: float | None = None, fit: bool = True) -> StepResult:
    """Measure a reference-step trace, fit it, estimate the phase margin, compare with a loop.

    Parameters
    ----------
    data
        TimeTrace or ``(time_s, samples)``.
    channel
        Channel name or index.
    model
        ``"second-order"``, ``"third-order"`` or ``"loop"`` (needs ``loop``).  The
        second-order fit is always made: ζ and the phase-margin estimate come from it.
    loop
        Loop gain T; when given, the closed-loop prediction is compared with the trace.
    loop_label, predicted_margins
        Where ``loop`` came from, and its predicted margins (dict), for the comparison.
    band, band_v
        Settling band: fraction of the step, or volts.
    step_time_s
        Known step instant (found from the trace otherwise).
    fit
        False for measurements only (no ζ, no phase-margin estimate).
    """
    if model not in MODELS:
        raise InputError(f"model {model!r} unknown; expected one of {MODELS}", source="--model")
    channel, why = choose_channel(data, channel, "step")
    _, _, name, source = trace_arrays(data, channel)
    m = measure_step(data, channel=channel, band=band, band_v=band_v, step_time_s=step_time_s)
    warnings = why + list(m.warnings)
    fits = []
    pm = None
    if fit:
        so = fit_step(data, channel=channel, model="second-order", measurement=m)
        fits.append(so)
        if model != "second-order":
            fits.append(fit_step(data, channel=channel, model=model, measurement=m, loop=loop))
        for f in fits:
            warnings += [f"{f.model} fit: {w}" for w in f.warnings]
        pm = estimate_phase_margin(so.value("zeta"), so.stderr("zeta"), so.value("fn_hz"),
                                   not_determined=zeta_not_determined(
                                       so.value("zeta"), so.stderr("zeta"), m.rise_time_s,
                                       m.sample_interval_s))
    comparison = None
    if loop is not None:
        t0 = fits[0].value("t0_s") if fits else m.step_time_s
        comparison = compare_step_with_loop(data, loop, t0, channel=channel, band=m.band,
                                            predicted_margins=predicted_margins, pm_estimate=pm,
                                            against=loop_label)
        warnings += list(comparison.warnings)
    return StepResult(mode="step", measurement=m, fits=tuple(fits), phase_margin=pm, comparison=comparison,
                      warnings=tuple(warnings),
                      provenance=Provenance(step="step", sources=(source,) if source else (),
                                            settings={"channel": name, "model": model, "band": band,
                                                      "band_v": band_v, "step_time_s": step_time_s,
                                                      "loop": loop_label if loop is not None else None}))


def analyse_load_step(data, *, channel: str | int | None = None, band: float = 0.02,
                      band_v: float | None = None, step_time_s: float | None = None,
                      current_step_a: float | None = None, current_channel: str | int | None = None,
                      zout: PlantModel | FrequencyResponse | None = None,
                      zout_label: str = "closed-loop output impedance", fit: bool = True) -> StepResult:
    """Measure a load-step trace; compare with the output-impedance prediction when given.

    The resonant output-impedance model is fitted (``fit``); its ζ, or without a
    fit the ζ of the ringing's log decrement, gives a phase-margin estimate (the
    load-step ringing shows the same closed-loop poles as a reference step).
    ``zout`` needs ``current_step_a``, or ``current_channel``: a channel of the
    same trace holding the load current, whose step (measured like a reference
    step) gives ΔI.
    """
    if current_channel is not None:
        if current_step_a is not None:
            raise InputError("give the load step size or a current channel, not both", source="--current-step")
        current_step_a = measure_step(data, channel=current_channel).step_v
    channel, why = choose_channel(data, channel, "load_step", current_channel)
    _, _, name, source = trace_arrays(data, channel)
    m = measure_load_step(data, channel=channel, band=band, band_v=band_v, step_time_s=step_time_s,
                          current_step_a=current_step_a)
    warnings = why + list(m.warnings)
    pm = None
    fits = ()
    if fit:
        f = fit_load_step(data, channel=channel, measurement=m)
        fits = (f,)
        warnings += [f"{f.model} fit: {w}" for w in f.warnings]
        pm = estimate_phase_margin(f.value("zeta"), f.stderr("zeta"), f.value("fn_hz"),
                                   not_determined=zeta_not_determined(
                                       f.value("zeta"), f.stderr("zeta"),
                                       getattr(m, "rise_time_s", float("nan")), m.sample_interval_s))
    elif math.isfinite(m.zeta_from_decrement):
        fn = m.ringing_freq_hz / math.sqrt(max(1.0 - m.zeta_from_decrement ** 2, 1e-12))
        pm = estimate_phase_margin(m.zeta_from_decrement, float("nan"), fn)
    comparison = None
    if zout is not None:
        if current_step_a is None:
            raise InputError("comparing with an output impedance needs the load step size in A",
                             source="--current-step")
        comparison = compare_load_step_with_zout(data, zout, current_step_a, channel=channel, band=band,
                                                 band_v=band_v, step_time_s=step_time_s, against=zout_label)
        warnings += list(comparison.warnings)
    return StepResult(mode="load_step", measurement=m, fits=fits, phase_margin=pm, comparison=comparison,
                      warnings=tuple(warnings),
                      provenance=Provenance(step="load_step", sources=(source,) if source else (),
                                            settings={"channel": name, "band": band, "band_v": band_v,
                                                      "step_time_s": step_time_s,
                                                      "current_step_a": current_step_a,
                                                      "current_channel": current_channel,
                                                      "zout": zout_label if zout is not None else None}))


def choose_channel(data, channel, mode: str, current_channel=None) -> tuple[str | int | None, list[str]]:
    """The channel to measure when the user named none, and a warning saying which and why.

    A channel the user gave, or a trace with one channel, is taken as it is (no
    warning).  Otherwise, for a load step (``mode`` "load_step") the output is
    a voltage beside the load current: the first channel the reader found in
    volts, other than ``current_channel``, is taken.  For a reference step the
    first column is taken (a scope's first channel is the usual place of the
    output); when the trace holds both a current and a voltage channel the
    warning adds that it may be a load step.  Evidence weighed: the units the
    reader found for each channel, then the order of the columns.
    """
    if channel is not None or not isinstance(data, TimeTrace) or len(data.names) < 2:
        return channel, []
    units = {n: str(u).strip() for n, u in (data.meta.get("units") or {}).items()}
    cur = None if current_channel is None else str(current_channel).lower()
    names = [n for n in data.names if str(n).lower() != cur] or list(data.names)
    volts = [n for n in names if units.get(n) == "V"]
    amps = [n for n in data.names if units.get(n) == "A"]
    if mode == "load_step" and volts:
        pick = volts[0]
        why = "the first channel in volts (a load step's output)" + (
            f"; {', '.join(repr(a) for a in amps)} in A is a current" if amps else "")
    else:
        pick = names[0]
        why = "the first column, as no --channel was given" + (
            f" (its unit: {units[pick]})" if units.get(pick) else "")
    out = f"the trace has channels {data.names}; measured {pick!r}, {why}; choose another with --channel"
    if mode == "step" and amps and volts:
        out += (f"; a current channel beside a voltage one ({volts[0]!r}) suggests a load step: "
                f"try --load-step")
    return pick, [out]
