"""The fit picture: measured vs model Bode plot, residual panel, poles and zeros marked."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np
from matplotlib.figure import Figure
from matplotlib.transforms import blended_transform_factory

from benchfit.data.response import FrequencyResponse
from benchfit.fitting.model import PlantModel
from benchfit.numfmt import FIT_DIGITS, sig
from benchfit.output import style
from benchfit.output.plot_common import (
    FREQ_LABEL,
    dense_grid,
    model_of,
    phase_near,
    phase_ticks,
    symmetric_ylim,
)
from benchfit.output.style import eng, log_axis, new_figure, note, styled


def mark_roots(ax, model: PlantModel, f_min_hz: float, f_max_hz: float) -> int:
    """Mark pole (×) and zero (○) frequencies |root|/2π on the bottom edge of ``ax``.

    Right-half-plane roots are drawn in the warning colour.  Returns how many
    roots fell outside the plotted band (they are not drawn).
    """
    tr = blended_transform_factory(ax.transData, ax.transAxes)
    outside = 0
    seen: set[tuple[str, float]] = set()
    for kind, roots, marker in (("pole", model.poles, "x"), ("zero", model.zeros, "o")):
        for r in roots:
            if r.imag < 0:
                continue  # a conjugate pair is one mark
            f = abs(r) / (2 * np.pi)
            if f == 0 or not (f_min_hz <= f <= f_max_hz):
                outside += 1
                continue
            key = (kind, round(float(np.log10(f)), 3))
            if key in seen:
                continue
            seen.add(key)
            rhp = r.real > 0
            color = style.WARN if rhp else style.BLACK
            ax.plot([f], [0.0], marker=marker, ms=9, mew=2.0, mfc="none", color=color,
                    transform=tr, clip_on=False, zorder=12, linestyle="none")
            if r.imag > 0:
                q = abs(r) / (2 * abs(r.real)) if r.real != 0 else np.inf
                ax.text(f, 0.075, f"Q {sig(q, FIT_DIGITS)}", transform=tr, ha="center", va="bottom",
                        fontsize=8, color=color, zorder=12)
    return outside


def _root_legend(ax) -> None:
    ax.plot([], [], "x", color=style.BLACK, mew=2, ms=8, label="fitted pole (|p|/2π)")
    ax.plot([], [], "o", color=style.BLACK, mfc="none", mew=2, ms=8, label="fitted zero")


@styled
def bode_fit(resp: FrequencyResponse, fit: Any, *, title: str | None = None) -> Figure:
    """Measured vs fitted Bode plot with a residual panel and poles/zeros marked.

    Parameters
    ----------
    resp
        The measured response.
    fit
        A :class:`PlantModel` or a fit result with ``.model`` (and, if it has
        them, ``.stats`` with ``rms_db``/``rms_deg``/``order``).
    title
        Figure title; defaults to the sweep's source file name.

    Returns
    -------
    matplotlib.figure.Figure
        Axes: magnitude (dB), phase (deg), residual (dB, with phase residual
        in deg on a twin axis), sharing a log frequency axis in Hz.
    """
    model = model_of(fit)
    f = resp.freq_hz
    fd = dense_grid(f[0], f[-1])
    hm = model.response(fd)
    meas_ph = resp.phase_deg
    fig = new_figure(8.0, 7.2)
    gs = fig.add_gridspec(3, 1, height_ratios=[3.0, 2.3, 1.4])
    ax_m = fig.add_subplot(gs[0])
    ax_p = fig.add_subplot(gs[1], sharex=ax_m)
    ax_r = fig.add_subplot(gs[2], sharex=ax_m)
    log_axis(ax_m)
    ax_m.plot(f, resp.mag_db, ".", color=style.MEASURED, ms=4, label="measured")
    ax_m.plot(fd, 20 * np.log10(np.abs(hm)), "-", color=style.MODEL, lw=2.0, label="model")
    ax_m.set_ylabel("Magnitude (dB)")
    ax_p.plot(f, meas_ph, ".", color=style.MEASURED, ms=4, label="measured")
    ax_p.plot(fd, phase_near(hm, float(meas_ph[0])), "-", color=style.MODEL, lw=2.0, label="model")
    ax_p.set_ylabel("Phase (deg)")
    ratio = resp.response / model.response(f)
    res_db = 20 * np.log10(np.abs(ratio))
    res_deg = np.degrees(np.angle(ratio))
    ax_r.axhline(0.0, color="#777777", lw=0.8)
    ax_r.plot(f, res_db, "-", color=style.MODEL, lw=1.3, label="magnitude (dB)")
    ax_r.set_ylabel("Residual (dB)", color=style.MODEL)
    symmetric_ylim(ax_r, res_db, 0.1)
    ax_r2 = ax_r.twinx()
    ax_r2.plot(f, res_deg, "--", color=style.SECOND, lw=1.3, label="phase (deg)")
    symmetric_ylim(ax_r2, res_deg, 1.0)
    ax_r2.set_ylabel("Residual (deg)", color=style.SECOND)
    ax_r2.grid(False)
    ax_r2.spines["right"].set_visible(True)
    ax_r.set_xlabel(FREQ_LABEL)
    ax_r.set_xlim(f[0], f[-1])
    for ax in (ax_m, ax_p):
        ax.tick_params(labelbottom=False)
    phase_ticks(ax_p)
    outside = mark_roots(ax_m, model, f[0], f[-1])
    _root_legend(ax_m)
    ax_m.legend(loc="best", ncols=2)
    lines = [ax_r.get_lines()[-1], ax_r2.get_lines()[-1]]
    # headroom above the residuals: the legend sits there, over no data
    for ax in (ax_r, ax_r2):
        lo, hi = ax.get_ylim()
        ax.set_ylim(lo, hi + 0.9 * (hi - lo))
    ax_r.legend(lines, [ln.get_label() for ln in lines], loc="upper left", ncols=2, fontsize=8)
    src = ", ".join(Path(s).name for s in resp.provenance.sources) or "measured response"
    ax_m.set_title(title or f"Fit of {src}")
    stats = getattr(fit, "stats", None) or {}
    nz = len(model.zeros)
    parts = [f"order {model.order}, {nz} zero{'' if nz == 1 else 's'}"]
    if model.delay_s:
        parts.append(f"delay {eng(model.delay_s, 's')}")
    if "rms_db" in stats and "rms_deg" in stats:
        parts.append(f"rms error {stats['rms_db']:.2g} dB / {stats['rms_deg']:.2g}°")
    if outside:
        parts.append(f"{outside} root(s) outside the band")
    note(ax_p, "\n".join(parts), loc="lower left")
    return fig
