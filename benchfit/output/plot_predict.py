"""Prediction pictures: tolerance spread, step and load step, output impedance."""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np
from matplotlib.figure import Figure

from benchfit.numfmt import db, deg, eng, pct
from benchfit.output import style
from benchfit.output.curves import Curve
from benchfit.output.placement import free_annotation, free_note
from benchfit.output.plot_common import FREQ_LABEL, time_scale
from benchfit.output.style import ENG_FORMATTER, log_axis, new_figure, styled

_NOTE_BOX = {"boxstyle": "round,pad=0.35", "facecolor": "white", "edgecolor": "#999999", "alpha": 0.95}


def _hist(ax, values: np.ndarray, *, log: bool, color: str) -> tuple[float, float] | None:
    """Histogram of the finite values; returns the x range of the data (None when there is none)."""
    v = values[np.isfinite(values)]
    if v.size == 0:
        ax.text(0.5, 0.5, "no finite values", transform=ax.transAxes, ha="center")
        return None
    bins: int | np.ndarray = 30
    lo, hi = float(v.min()), float(v.max())
    if log and np.all(v > 0) and hi > 10 * lo:   # a wide spread reads best on a log axis
        bins = np.logspace(np.log10(lo), np.log10(hi), 31)
        log_axis(ax)
    elif log:                                     # a narrow one on a linear axis, still with prefixes
        ax.xaxis.set_major_formatter(ENG_FORMATTER)
    else:
        ax.ticklabel_format(axis="x", useOffset=False, style="plain")
    if hi == lo:
        bins = 1
    ax.hist(v, bins=bins, color=color, edgecolor="white", linewidth=0.5, alpha=0.95)
    return lo, hi


def data_view(lo: float, hi: float, log: bool) -> tuple[float, float]:
    """The x range a histogram is drawn over: its own data with a 6 % margin each side.

    The targets do not widen it: a target far from the draws would squeeze
    the histogram into a sliver (it is drawn as an arrow at the edge instead,
    :func:`target_marker`).
    """
    if log and lo > 0:
        a, b = np.log10(lo), np.log10(hi)
        pad = max(0.06 * (b - a), 0.01)
        return float(10 ** (a - pad)), float(10 ** (b + pad))
    span = hi - lo
    pad = 0.06 * span if span > 0 else max(abs(lo) * 0.01, 1e-12)
    return lo - pad, hi + pad


def view_with_target(view: tuple[float, float], target: float, log: bool) -> tuple[float, float]:
    """Widen a histogram's view to a target lying near it (within half the view's width).

    A near target reads best as a line beside the bars; a far one would squeeze
    them, so the view stays on the data and the target becomes an edge arrow.
    """
    lo, hi = view
    tr = (lambda v: math.log10(v)) if log else (lambda v: v)
    if log and not target > 0:
        return view
    a, b, t = tr(lo), tr(hi), tr(target)
    span = b - a
    if a <= t <= b or span <= 0 or min(abs(t - a), abs(t - b)) > 0.5 * span:
        return view
    a, b = min(a, t - 0.04 * span), max(b, t + 0.04 * span)
    return (10 ** a, 10 ** b) if log else (a, b)


def target_marker(ax, target: float, view: tuple[float, float], text: str) -> str:
    """Draw a target inside the view as a dashed line, outside it as an arrow at the nearer edge.

    Returns 'line', 'left' or 'right' (where it was drawn).
    """
    lo, hi = view
    if lo <= target <= hi:
        ax.axvline(target, color=style.TARGET, ls="--", lw=2.0, label=text)
        return "line"
    right = target > hi
    x = 0.985 if right else 0.015
    arrow = "→" if right else "←"
    ax.annotate(f"{text} {arrow}" if right else f"{arrow} {text}", xy=(x, 0.70), xycoords="axes fraction",
                ha="right" if right else "left", va="center", color=style.TARGET, fontsize=8.5,
                fontweight="bold", bbox={"boxstyle": "round,pad=0.25", "fc": "white", "ec": style.TARGET,
                                         "alpha": 0.95}, zorder=11)
    ax.plot([], [], ls="none", marker=">" if right else "<", color=style.TARGET, label=f"{text} (off scale)")
    return "right" if right else "left"


@styled
def spread_histograms(pm_deg: Sequence[float], crossover_hz: Sequence[float],
                      gm_db: Sequence[float] | None = None, *, pm_min_deg: float | None = None,
                      crossover_target_hz: float | None = None, gm_min_db: float | None = None,
                      yield_fraction: float | None = None, what: str = "part tolerances",
                      drawn_yield: float | None = None, title: str | None = None) -> Figure:
    """Histograms of phase margin, crossover (and gain margin) over Monte Carlo draws.

    Each histogram is scaled to its own draws (:func:`data_view`); a target
    inside that view is a dashed line, one outside it an arrow at the edge
    with its value (:func:`target_marker`).

    Parameters
    ----------
    pm_deg, crossover_hz, gm_db
        One value per draw (degrees, Hz, dB).  Infinite gain margins (no
        phase crossing) are counted in the note, not drawn.
    pm_min_deg, crossover_target_hz, gm_min_db
        Targets.
    yield_fraction
        Fraction of draws meeting every target (0..1), written on the figure.
    drawn_yield
        When the histograms are of other draws than ``yield_fraction`` was
        computed from: their own yield, written beside it.
    what
        What was varied, for the note.

    Returns
    -------
    Figure
        Two or three axes: count against phase margin (°), crossover (Hz)
        and gain margin (dB).
    """
    pm = np.asarray(pm_deg, dtype=float)
    fc = np.asarray(crossover_hz, dtype=float)
    panels = [("Phase margin (deg)", pm, False, pm_min_deg, "minimum", deg),
              ("Crossover (Hz)", fc, True, crossover_target_hz, "target", lambda v: eng(v, "Hz"))]
    if gm_db is not None:
        panels.append(("Gain margin (dB)", np.asarray(gm_db, dtype=float), False, gm_min_db, "minimum", db))
    fig = new_figure(3.6 * len(panels) + 0.8, 4.0)
    axes = fig.subplots(1, len(panels), sharey=True)
    for ax, (label, vals, log, target, kind, fmt) in zip(axes, panels, strict=True):
        rng = _hist(ax, vals, log=log, color=style.SPREAD)
        if rng is not None:
            view = data_view(*rng, log=log and ax.get_xscale() == "log")
            med = float(np.median(vals[np.isfinite(vals)]))
            ax.axvline(med, color=style.MODEL, lw=1.6, label=f"median {fmt(med)}")
            if target is not None and math.isfinite(target):
                view = view_with_target(view, target, log and ax.get_xscale() == "log")
                target_marker(ax, target, view, f"{kind} {fmt(target)}")
            ax.set_xlim(*view)
        ax.set_xlabel(label)
        ax.legend(loc="upper right", fontsize=8)
    axes[0].set_ylabel("Draws (count)")
    # headroom above the tallest bar: the legend and the off-scale targets sit there, over no bar
    top = max((max((p.get_height() for p in ax.patches), default=0.0) for ax in axes), default=0.0)
    if top > 0:
        axes[0].set_ylim(0.0, top * 1.6)
    for ax, (_label, vals, *_rest) in zip(axes, panels, strict=True):
        n_inf = int(np.sum(np.isinf(vals)))
        if n_inf:
            free_note(ax, f"{n_inf} draws: no phase crossing\n(gain margin not defined)", fontsize=8.5,
                      bbox=_NOTE_BOX, prefer=("upper left", "upper right"))
    n = len(pm)
    head = title or f"Spread over {n} draws of {what}"
    if yield_fraction is not None:
        ok = yield_fraction >= 0.99
        extra = f" (these draws: {pct(drawn_yield)})" if drawn_yield is not None else ""
        fig.suptitle(f"{head}: yield {pct(yield_fraction)}{extra}", fontweight="bold",
                     color=style.BLACK if ok else style.WARN, x=0.01, ha="left", fontsize=11.5)
    else:
        fig.suptitle(head, fontweight="bold", x=0.01, ha="left", fontsize=11.5)
    return fig


@styled
def step_response(step: Curve | None = None, load_step: Curve | None = None, *,
                  measured: Curve | None = None, measured_load: Curve | None = None,
                  step_spread: tuple[Curve, Curve] | None = None, title: str | None = None) -> Figure:
    """Predicted reference step and load step, with a measured trace overlaid.

    Parameters
    ----------
    step
        Predicted response to a reference step (time in s; unit of the values
        as in the curve, e.g. V or 1 for a normalised step).
    load_step
        Predicted output deviation for a load-current step (V).
    measured, measured_load
        Measured traces already brought to the prediction's time origin and
        level, drawn over ``step`` and ``load_step``.
    step_spread
        Lower and upper envelope of the step over tolerance draws (shaded).

    Returns
    -------
    Figure
        One axes per given prediction, time on x in a readable unit.
    """
    panels = [(c, name) for c, name in ((step, "step"), (load_step, "load step")) if c is not None]
    if not panels:
        raise ValueError("step_response needs a step or a load step")
    t_max = max(float(c.x[-1]) for c, _ in panels)
    factor, unit = time_scale(t_max)
    fig = new_figure(8.0, 3.4 * len(panels) + 0.6)
    axes = np.atleast_1d(fig.subplots(len(panels), 1))
    for ax, (c, name) in zip(axes, panels, strict=True):
        if name == "step" and step_spread is not None:
            lo, hi = step_spread
            ax.fill_between(lo.x * factor, lo.y, hi.y, color=style.SPREAD, alpha=0.35, lw=0,
                            label="spread over tolerances")
        meas = measured if name == "step" else measured_load
        lo = float(c.x[0])
        if meas is not None:
            keep = (meas.x >= -0.1 * t_max) & (meas.x <= t_max)
            ax.plot(meas.x[keep] * factor, meas.y[keep], "-", color=style.MEASURED, lw=1.0, alpha=0.8,
                    label=meas.name or "measured")
            lo = -0.1 * t_max
        color = style.MODEL if name == "step" else style.SECOND
        x, y = c.x, c.y
        if lo < x[0] and x[0] >= 0:  # at rest before the step: draw the baseline (and any jump at 0)
            x, y = np.concatenate([[lo, x[0]], x]), np.concatenate([[0.0, 0.0], y])
        ax.plot(x * factor, y, "-", color=color, lw=2.0, label=c.name or f"predicted {name}")
        ax.axhline(0.0, color="#777777", lw=0.8)
        ax.set_xlim(min(0.0, lo) * factor, t_max * factor)
        ax.set_ylabel(f"{'Output' if name == 'step' else 'Output deviation'} ({_unit_text(c.unit)})")
        ax.set_xlabel(f"Time ({unit})")
        ax.legend(loc="best", fontsize=8.5)
        ax.set_title("Reference step" if name == "step" else "Load step", fontsize=10.5)
    fig.suptitle(title or "Predicted time response", fontweight="bold", x=0.01, ha="left", fontsize=11.5)
    return fig


def _unit_text(unit: str) -> str:
    return {"1": "V/V", "ohm": "Ω"}.get(unit, unit)


@styled
def output_impedance(open_loop: Curve, closed_loop: Curve, *, measured: Curve | None = None,
                     open_is_measured: bool = False, title: str | None = None) -> Figure:
    """|Z| of the output, open loop and closed loop (Zcl = Zol / (1 + T)), against frequency.

    Parameters
    ----------
    open_loop, closed_loop
        Impedance curves (complex, ohm) against frequency (Hz).
    measured
        Optional measured open-loop impedance, drawn as points.
    open_is_measured
        ``open_loop`` is itself a measured sweep: draw it as points.

    Returns
    -------
    Figure
        One log-log axes: impedance (Ω) against frequency (Hz).
    """
    fig = new_figure(8.0, 4.8)
    ax = fig.add_subplot(1, 1, 1)
    log_axis(ax, "x")
    log_axis(ax, "y")
    if measured is not None:
        ax.plot(measured.x, np.abs(measured.y), ".", color=style.MEASURED, ms=4, label=measured.name or "measured")
    if open_is_measured:
        ax.plot(open_loop.x, np.abs(open_loop.y), ".", color=style.MEASURED, ms=4,
                label=f"{open_loop.name or 'open loop'}, measured")
    else:
        ax.plot(open_loop.x, np.abs(open_loop.y), "--", color=style.SECOND, lw=2.0,
                label=open_loop.name or "open loop")
    ax.plot(closed_loop.x, np.abs(closed_loop.y), "-", color=style.MODEL, lw=2.0,
            label=closed_loop.name or "closed loop")
    zc = np.abs(closed_loop.y)
    i = int(np.argmax(zc))
    ax.plot([closed_loop.x[i]], [zc[i]], "v", color=style.WARN, ms=8)
    peak = (f"peak {eng(float(zc[i]), 'Ω')} at {eng(float(closed_loop.x[i]), 'Hz')}",
            (float(closed_loop.x[i]), float(zc[i])))
    ax.set_xlim(closed_loop.x[0], closed_loop.x[-1])
    ax.set_xlabel(FREQ_LABEL)
    ax.set_ylabel("|Z| (Ω)")
    ax.legend(loc="best", fontsize=8.5)
    ax.set_title(title or "Output impedance, open and closed loop")
    free_annotation(ax, peak[0], peak[1], color=style.WARN, fontsize=9.5,
                    bbox={"boxstyle": "round,pad=0.25", "fc": "white", "ec": "none", "alpha": 0.85})
    return fig
