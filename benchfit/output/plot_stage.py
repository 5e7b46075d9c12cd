"""Pictures of an op-amp stage: the 1/β crossing and the predicted responses.

The crossing picture draws |Aol| and |1/β| (1/β_eff = Aol/T, the inverse of
the design's compensator) on one gain plot, the closed-loop gain beside
them, the intersection with the rate of closure written there (the number
the design computed once, ``design.crossing``: the same figure as the text
and the JSON), and the load pole and ESR zero as marked frequencies.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
from matplotlib.figure import Figure

from benchfit.data.trace import TimeTrace
from benchfit.numfmt import eng
from benchfit.output.plot_common import FREQ_LABEL, dense_grid
from benchfit.output.style import (
    EXTRA,
    MEASURED,
    MODEL,
    SECOND,
    TARGET,
    WARN,
    log_axis,
    new_figure,
    note,
    styled,
)


def _band(design) -> tuple[float, float]:
    lo, hi = design.plant.band_hz
    fc = design.crossing["freq_hz"]
    if math.isfinite(fc):
        lo, hi = max(lo, fc / 1e5), min(hi, fc * 1e3)
    return lo, hi


@styled
def crossing_figure(design: Any, *, which: str = "snapped", measured_closed: Any = None) -> Figure:
    """|Aol|, |1/β| and |G| against frequency with the crossing, its rate of closure and the
    load's corners.  ``measured_closed``: a measured closed-loop sweep to overlay."""
    from benchfit.loop.stage_response import closed_loop_values

    pred = design.snapped if which == "snapped" else design.ideal
    net = pred.network
    f = dense_grid(*_band(design), per_decade=120)
    aol = design.plant.response(f)
    v = closed_loop_values(net, aol, f)
    inv_beta = 1.0 / net.response(f)
    fig = new_figure(8.0, 5.2)
    ax = fig.add_subplot(1, 1, 1)
    ax.plot(f, 20 * np.log10(np.abs(aol)), color=MODEL, label="|Aol| (op-amp + output stage + load)")
    ax.plot(f, 20 * np.log10(np.abs(inv_beta)), color=SECOND, linestyle="--",
            label=f"|1/β| ({net.kind} network, {which} parts)")
    ax.plot(f, 20 * np.log10(np.abs(v["gain"])), color=TARGET, linestyle="-.",
            label="|closed-loop gain|")
    if measured_closed is not None:
        ax.plot(measured_closed.freq_hz, 20 * np.log10(np.abs(measured_closed.response)),
                color=MEASURED, linestyle="none", marker=".", markersize=3,
                label="measured closed loop")
    c = design.crossing
    if math.isfinite(c["freq_hz"]):
        ax.plot([c["freq_hz"]], [c["aol_db"]], marker="o", color=WARN, markersize=7, zorder=5)
        ax.annotate(f"rate of closure {c['rate_of_closure_db_per_decade']:.0f} dB/decade\n"
                    f"at {eng(c['freq_hz'], 'Hz')}",
                    (c["freq_hz"], c["aol_db"]), textcoords="offset points", xytext=(12, 14),
                    fontsize=9, color=WARN)
    ld = design.load
    for fz, label, style in ((ld.load_pole_hz(), "load pole", ":"), (ld.esr_zero_hz(), "ESR zero", "-.")):
        if fz is not None and f[0] <= fz <= f[-1]:
            ax.axvline(fz, color=EXTRA, linestyle=style, linewidth=1.1)
            ax.text(fz, 0.55, f" {label}\n {eng(fz, 'Hz')}", transform=ax.get_xaxis_transform(),
                    fontsize=8.5, color=EXTRA, va="bottom")
    m = pred.corners[0]
    note(ax, f"PM {m.phase_margin_deg:.1f}° at {eng(m.crossover_hz, 'Hz')}, GM {m.gain_margin_db:.1f} dB\n"
             f"(exact margins; the rate of closure is the rule-of-thumb view:\n"
             f" {c['reading']})")
    log_axis(ax)
    ax.set_xlabel(FREQ_LABEL)
    ax.set_ylabel("Gain (dB)")
    top = max(float(np.max(20 * np.log10(np.abs(aol)))), 20.0)
    ax.set_ylim(min(-40.0, float(np.min(20 * np.log10(np.abs(inv_beta)))) - 10), top + 10)
    ax.set_title(f"{design.stage} stage: where 1/β meets Aol")
    ax.legend(loc="lower left")
    return fig


@styled
def stage_prediction_figure(pred: Any, *, step_trace: TimeTrace | None = None,
                            step_channel: str | None = None, load_trace: TimeTrace | None = None,
                            load_channel: str | None = None) -> Figure:
    """Small-signal step and load step (measured traces overlaid when given), output impedance."""
    fig = new_figure(8.0, 7.5)
    axs = fig.subplots(3, 1)
    s = pred.step
    axs[0].plot(s.time_s * 1e6, s.value * 1e3, color=MODEL, label="predicted")
    if step_trace is not None:
        ch = step_channel or step_trace.names[0]
        y = np.asarray(step_trace.channel(ch), dtype=float)
        axs[0].plot(step_trace.time_s * 1e6, (y - y[0]) * 1e3, color=MEASURED, linestyle="none",
                    marker=".", markersize=2, label=f"measured ({ch})")
    axs[0].set_xlabel("Time (µs)")
    axs[0].set_ylabel("Output (mV)")
    axs[0].set_title(f"small-signal step {s.step_size * 1e3:g} mV: overshoot {s.overshoot_pct:.1f} %")
    axs[0].legend(loc="lower right")
    if pred.load is not None:
        ld = pred.load
        axs[1].plot(ld.time_s * 1e6, ld.value * 1e3, color=SECOND, label="predicted")
        if load_trace is not None:
            ch = load_channel or load_trace.names[0]
            y = np.asarray(load_trace.channel(ch), dtype=float)
            axs[1].plot(load_trace.time_s * 1e6, (y - y[0]) * 1e3, color=MEASURED, linestyle="none",
                        marker=".", markersize=2, label=f"measured ({ch})")
        axs[1].set_title(f"load step {ld.step_size * 1e3:g} mA into the capacitor: peak "
                         f"{ld.peak_value * 1e3:.3g} mV")
        axs[1].legend(loc="lower right")
    else:
        axs[1].set_title("load step: not predicted (no output resistance given)")
    axs[1].set_xlabel("Time (µs)")
    axs[1].set_ylabel("Output deviation (mV)")
    z = np.abs(pred.z_closed)
    if np.any(z > 0):
        axs[2].plot(pred.freq_hz, z, color=SECOND, label="|Z_out| closed loop")
        log_axis(axs[2], "y")
    log_axis(axs[2])
    axs[2].set_xlabel(FREQ_LABEL)
    axs[2].set_ylabel("Ohm")
    axs[2].set_title("output impedance Z_ol/(1 + T)")
    return fig


def stage_curve(design: Any, name: str, *, which: str = "snapped", step_v: float = 0.01,
                load_step_a: float = 0.01):
    """One predicted curve of a stage design (for `benchfit predict`)."""
    from benchfit.errors import InputError
    from benchfit.output.curves import Curve

    pred_parts = design.snapped if which == "snapped" else design.ideal
    if name == "loop":
        f = dense_grid(*design.plant.band_hz, per_decade=60)
        return Curve(f"loop gain ({which} parts)", "freq_hz", f,
                     design.plant.response(f) * pred_parts.network.response(f))
    p = stage_prediction(design, which=which, step_v=step_v, load_step_a=load_step_a)
    if name == "closed":
        return Curve(f"closed loop ({which} parts)", "freq_hz", p.freq_hz, p.closed)
    if name == "zout":
        return Curve(f"output impedance ({which} parts)", "freq_hz", p.freq_hz, p.z_closed, unit="ohm")
    if name == "step":
        return Curve(f"small-signal step {step_v:g} V ({which} parts)", "time_s", p.step.time_s,
                     p.step.value, unit="V")
    if name == "load_step":
        if p.load is None:
            raise InputError("no load step: the design has no output resistance", source="--curve")
        return Curve(f"load step {load_step_a:g} A ({which} parts)", "time_s", p.load.time_s,
                     p.load.value, unit="V")
    raise InputError(f"curve {name!r} unknown", source="--curve")


def stage_prediction(design: Any, *, which: str = "snapped", step_v: float = 0.01,
                     load_step_a: float | None = 0.01):
    """:func:`benchfit.loop.stage_predict.predict_stage` for a stage design."""
    from benchfit.errors import InputError
    from benchfit.fitting.model import PlantModel
    from benchfit.loop.stage_predict import predict_stage

    if not isinstance(design.plant.plant, PlantModel):
        raise InputError("the stage design holds a measured Aol; time responses need a model")
    pred = design.snapped if which == "snapped" else design.ideal
    f = dense_grid(*_band(design), per_decade=60)
    return predict_stage(pred.network, design.plant.plant, freq_hz=f,
                         crossover_hz=pred.corners[0].crossover_hz, step_v=step_v,
                         load_step_a=load_step_a)
