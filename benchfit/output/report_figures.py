"""The pictures of a report, built from its inputs in reading order."""

from __future__ import annotations

import math
from dataclasses import dataclass

from matplotlib.figure import Figure

from benchfit.data.response import FrequencyResponse
from benchfit.numfmt import sig
from benchfit.output import plots
from benchfit.output.report_inputs import ReportInputs
from benchfit.output.spread_draws import SpreadDraws, spread_draws
from benchfit.output.summary import rate_of_closure


@dataclass(frozen=True, eq=False)
class ReportFigure:
    """One picture of the report: where it goes, its caption, and the figure."""

    key: str
    section: str
    caption: str
    figure: Figure


def achieved_crossover_hz(inputs: ReportInputs) -> float:
    """Crossover of the snapped design on the worst corner, Hz."""
    return float(inputs.design.snapped.worst_margins().crossover_hz)


def target_crossover_hz(inputs: ReportInputs) -> float | None:
    d = inputs.design
    if d.targets.crossover_hz:
        return float(d.targets.crossover_hz)
    return float(d.synthesis.crossover_hz) if d.synthesis is not None else None


def report_figures(inputs: ReportInputs, *, draws: SpreadDraws | None = None) -> list[ReportFigure]:
    """Every picture the inputs allow, in the order the report shows them.

    Parameters
    ----------
    inputs
        The report's inputs.
    draws
        Per-draw margins for the spread histograms (drawn again with the
        design's seed when None and the design has a spread).
    """
    d = inputs.design
    out: list[ReportFigure] = []
    plant = d.corners[0].plant
    if inputs.sweep is not None and (inputs.fit is not None or not isinstance(plant, FrequencyResponse)):
        fit = inputs.fit if inputs.fit is not None else plant
        out.append(ReportFigure(
            "fit", "fit", "Measured plant (points) against the fitted model (line); the small panel is "
            "the residual, measured/model, in dB and degrees. × marks fitted poles and ○ zeros at "
            "|root|/2π; a red mark is a right-half-plane root.",
            plots.bode_fit(inputs.sweep, fit)))
    fc_t, fc_a = target_crossover_hz(inputs), achieved_crossover_hz(inputs)
    band = (d.corners[0].band_hz if d.corners[0].band_hz else None)
    roc = rate_of_closure(d)      # the one figure the text and the JSON summary quote too
    out.append(ReportFigure(
        "crossing", "design", "Plant gain |P·H| (plant times sensing) against 1/beta, the inverse of the "
        "compensator's gain: the loop crosses over where they meet. The rate of closure written at the "
        f"crossing is the difference of their slopes there ({roc['parts']} parts, {roc['plant']} plant), "
        "the figure quoted above.",
        plots.crossing_view(d.corners[0].response, d.snapped.compensator, target_crossover_hz=fc_t,
                            achieved_crossover_hz=fc_a if math.isfinite(fc_a) else None,
                            band_hz=band, reference_compensator=d.ideal.compensator,
                            crossing_hz=roc["freq_hz"], rate_of_closure=roc["rate_of_closure_db"])))
    # the worst corner's loop when it is at hand (a design read from JSON keeps only the nominal one)
    w = d.snapped.worst if d.snapped.worst < len(d.snapped.loops) else 0
    loop, margins = d.snapped.loops[w], d.snapped.corners[w]
    ref = d.ideal.loops[w] if d.ideal.network.parts != d.snapped.network.parts and w < len(d.ideal.loops) else None
    which = "worst" if w == d.snapped.worst else "nominal"
    corner = f" on the {which} plant corner ({d.corners[w].name})" if len(d.corners) > 1 else ""
    out.append(ReportFigure(
        "loop", "margins", f"Loop gain T = plant · sensing · compensator with snapped parts{corner}. "
        "The phase margin is read at the gain crossover (○), the gain margin at the phase "
        "crossing (◇); dashed: ideal parts.",
        plots.loop_gain(loop, margins, reference=ref)))
    out.append(ReportFigure(
        "nyquist", "margins", "Nyquist plot near −1. The dashed circle around −1 has the modulus "
        "margin as radius: the smallest distance from the loop to −1.",
        plots.nyquist(loop, margins)))
    if d.spread is not None:
        if draws is None:
            fit_draws = inputs.fit.draw_responses if inputs.fit is not None else None
            draws = spread_draws(d, plant_draws=fit_draws)
        if draws is not None:
            same = draws.plant_uncertainty == d.spread.plant_uncertainty and draws.seed is not None
            out.append(ReportFigure(
                "spread", "margins", f"Margins over {draws.pm_deg.size} Monte Carlo draws of the snapped "
                f"parts (R ±{sig(d.spread.r_tol * 100)} %, C ±{sig(d.spread.c_tol * 100)} %"
                + (", plant parameters from the fit's covariance" if draws.plant_uncertainty else "")
                + "), worst corner of each draw. The yield is the share of draws meeting every target "
                "with a stable loop. Each histogram is scaled to its own draws; a target outside that "
                "range is an arrow at the edge. " + ("These are the draws the table above was computed from."
                                          if same else "Fresh draws: the table above quotes the "
                                          "design's own (the plant fit was not given, or no seed)."),
                plots.spread_histograms(draws.pm_deg, draws.crossover_hz, draws.gm_db,
                                        pm_min_deg=d.targets.phase_margin_deg, crossover_target_hz=fc_t,
                                        gm_min_db=d.targets.gain_margin_db,
                                        yield_fraction=d.spread.yield_fraction,
                                        drawn_yield=None if same else draws.yield_fraction)))
    step, load = inputs.curve("step"), inputs.curve("load_step")
    if step is not None or load is not None:
        st = inputs.stimuli or {}
        sizes = []
        if step is not None and st.get("reference"):
            sizes.append(f"reference step: {st['reference']}")
        if load is not None and st.get("load"):
            sizes.append(f"load step: {st['load']}")
        out.append(ReportFigure(
            "step", "time", "Predicted response to a reference step and to a load step (snapped "
            "parts, delay simulated exactly)"
            + ("; black: the measured traces, aligned at their step instant and initial level"
               if inputs.curve("step_measured") or inputs.curve("load_measured") else "") + ". "
            + ("Step sizes of the predictions: " + "; ".join(sizes) + "." if sizes else ""),
            plots.step_response(step, load, measured=inputs.curve("step_measured"),
                                measured_load=inputs.curve("load_measured"))))
    zo, zc = inputs.curve("zout_open"), inputs.curve("zout_closed")
    if zo is not None and zc is not None:
        out.append(ReportFigure(
            "zout", "time", "Output impedance: open loop"
            + (" (measured sweep, points)" if inputs.zout is not None else "")
            + " and predicted closed loop, Zcl = Zol / (1 + T).",
            plots.output_impedance(zo, zc, open_is_measured=inputs.zout is not None)))
    return out
