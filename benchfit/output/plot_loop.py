"""Loop pictures: loop gain with its margins, Nyquist near −1, and the crossing view.

A loop (or plant, or compensator) can be given as a PlantModel, a measured
FrequencyResponse, or any callable mapping freq_hz to complex values.  The
margins are drawn from a :class:`benchfit.loop.margins.Margins` result, so
the picture shows exactly the numbers the report quotes.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
from matplotlib.figure import Figure
from matplotlib.patches import Circle

from benchfit.data.response import FrequencyResponse
from benchfit.loop.closure import rate_of_closure_db
from benchfit.loop.margins import Margins
from benchfit.numfmt import db, db_per_decade, deg, eng, sig
from benchfit.output import style
from benchfit.output.placement import free_annotation, free_note
from benchfit.output.plot_common import FREQ_LABEL, phase_ticks, sampled
from benchfit.output.style import log_axis, new_figure, styled

_LABEL_BOX = {"boxstyle": "round,pad=0.25", "fc": "white", "ec": "none", "alpha": 0.85}
_NOTE_BOX = {"boxstyle": "round,pad=0.35", "facecolor": "white", "edgecolor": "#999999", "alpha": 0.95}


def loop_band(margins: Margins, loop: Any, decades: float = 2.0) -> tuple[float, float]:
    """Band (Hz) to draw a loop over: every crossing ± ``decades``, inside the examined band."""
    if isinstance(loop, FrequencyResponse):
        return loop.f_min_hz, loop.f_max_hz
    # phase crossings far below 0 dB (a delay makes endless ones) do not set the view
    fs = [c["freq_hz"] for c in margins.crossings if math.isfinite(c["freq_hz"])
          and (c["kind"] == "gain" or abs(c["value"]) < 40.0)]
    for v in (margins.crossover_hz, margins.phase_crossover_hz, margins.modulus_freq_hz):
        if math.isfinite(v):
            fs.append(v)
    if not fs:
        lo, hi = margins.f_min_hz, margins.f_max_hz
        return (lo, hi) if math.isfinite(lo) and math.isfinite(hi) else (1.0, 1e6)
    lo, hi = min(fs) / 10 ** decades, max(fs) * 10 ** decades
    if math.isfinite(margins.f_min_hz):
        lo = max(lo, margins.f_min_hz)
    if math.isfinite(margins.f_max_hz):
        hi = min(hi, margins.f_max_hz)
    return lo, hi


def _phase_branch(f: np.ndarray, h: np.ndarray, margins: Margins) -> np.ndarray:
    """Unwrapped ∠T in degrees, on the branch where ∠T(fc) = PM − 180°."""
    ph = np.degrees(np.unwrap(np.angle(h)))
    fc, pm = margins.crossover_hz, margins.phase_margin_deg
    if math.isfinite(fc) and math.isfinite(pm) and f[0] <= fc <= f[-1]:
        at = float(np.interp(np.log10(fc), np.log10(f), ph))
        return ph - 360.0 * np.round((at - (pm - 180.0)) / 360.0)
    # no crossover in view: put the low-frequency end in (−360°, 0°]
    return ph - 360.0 * np.floor(ph[0] / 360.0 + 1.0) + (360.0 if ph[0] % 360.0 == 0 else 0.0)


def _interp_log(f: np.ndarray, y: np.ndarray, at: float) -> float:
    return float(np.interp(np.log10(at), np.log10(f), y))


@styled
def loop_gain(loop: Any, margins: Margins, *, reference: Any = None,
              label: str = "loop gain T", reference_label: str = "ideal parts",
              title: str | None = None) -> Figure:
    """Loop gain magnitude and phase with the margins drawn where they are read.

    Parameters
    ----------
    loop
        The loop gain T (return ratio): PlantModel, FrequencyResponse or callable of freq_hz.
    margins
        Margins of ``loop`` (from :mod:`benchfit.loop.margins`).
    reference
        Optional second loop drawn dashed (e.g. with ideal, unsnapped parts).
    label, reference_label
        Legend texts.
    title
        Figure title.

    Returns
    -------
    Figure
        Axes: magnitude (dB) and phase (deg) against frequency (Hz).  The
        phase margin is an arrow from −180° up to ∠T at the crossover, the
        gain margin an arrow from |T| up to 0 dB at the phase crossover, and
        every gain (○) and phase (◇) crossing is marked.
    """
    lo, hi = loop_band(margins, loop, decades=1.5)
    f, h = sampled(loop, lo, hi, 300)
    mag_db = 20 * np.log10(np.abs(h))
    ph = _phase_branch(f, h, margins)
    fig = new_figure(8.0, 6.6)
    ax_m, ax_p = fig.subplots(2, 1, sharex=True, height_ratios=[1.0, 1.0])
    log_axis(ax_m)
    is_data = isinstance(loop, FrequencyResponse)
    ax_m.plot(f, mag_db, "-" if not is_data else ".-", color=style.MODEL, lw=2.0, ms=3, label=label)
    ax_p.plot(f, ph, "-" if not is_data else ".-", color=style.MODEL, lw=2.0, ms=3, label=label)
    if reference is not None:
        fr, hr = sampled(reference, lo, hi, 300)
        ax_m.plot(fr, 20 * np.log10(np.abs(hr)), "--", color=style.SECOND, lw=1.5, label=reference_label)
        phr = np.degrees(np.unwrap(np.angle(hr)))
        phr = phr - 360.0 * np.round((phr[0] - _interp_log(f, ph, fr[0])) / 360.0)
        ax_p.plot(fr, phr, "--", color=style.SECOND, lw=1.5, label=reference_label)
    ax_m.axhline(0.0, color="#555555", lw=1.0)
    # −180° (and its 360° repeats) in view: where the gain margin is read
    p_lo, p_hi = float(np.min(ph)), float(np.max(ph))
    for k in range(int(np.floor((max(p_lo, -450.0) + 180) / 360)),
                   int(np.ceil((min(p_hi, 180.0) + 180) / 360)) + 1):
        ax_p.axhline(-180.0 + 360.0 * k, color="#555555", lw=1.0)
    fc, pm = margins.crossover_hz, margins.phase_margin_deg
    fg, gm = margins.phase_crossover_hz, margins.gain_margin_db
    for c in margins.crossings:
        fx = c["freq_hz"]
        if not (f[0] <= fx <= f[-1]):
            continue
        if c["kind"] == "gain":
            ax_m.plot([fx], [0.0], "o", ms=8, mfc="white", mec=style.BLACK, mew=1.8, zorder=6)
            ax_p.plot([fx], [_interp_log(f, ph, fx)], "o", ms=8, mfc="white", mec=style.BLACK,
                      mew=1.8, zorder=6)
        else:
            ax_m.plot([fx], [_interp_log(f, mag_db, fx)], "D", ms=7, mfc="white", mec=style.BLACK,
                      mew=1.8, zorder=6)
            ax_p.plot([fx], [_interp_log(f, ph, fx)], "D", ms=7, mfc="white", mec=style.BLACK,
                      mew=1.8, zorder=6)
    ax_m.plot([], [], "o", ms=8, mfc="white", mec=style.BLACK, mew=1.8, ls="none",
              label="gain crossing (|T| = 1)")
    ax_m.plot([], [], "D", ms=7, mfc="white", mec=style.BLACK, mew=1.8, ls="none",
              label="phase crossing (∠T = −180°)")
    pm_label = gm_label = None
    if math.isfinite(fc) and math.isfinite(pm) and f[0] <= fc <= f[-1]:
        at = _interp_log(f, ph, fc)
        base = at - pm
        ax_p.annotate("", xy=(fc, at), xytext=(fc, base),
                      arrowprops={"arrowstyle": "-|>", "color": style.TARGET, "lw": 2.2})
        pm_label = (f"phase margin {deg(pm)}\nat {eng(fc, 'Hz')}", (fc, (at + base) / 2))
        for ax in (ax_m, ax_p):
            ax.axvline(fc, color=style.TARGET, lw=0.9, ls=":")
    if math.isfinite(fg) and math.isfinite(gm) and f[0] <= fg <= f[-1]:
        at_db = _interp_log(f, mag_db, fg)
        ax_m.annotate("", xy=(fg, 0.0), xytext=(fg, at_db),
                      arrowprops={"arrowstyle": "-|>", "color": style.WARN, "lw": 2.2})
        gm_label = (f"gain margin {db(gm)}\nat {eng(fg, 'Hz')}", (fg, at_db / 2))
        for ax in (ax_m, ax_p):
            ax.axvline(fg, color=style.WARN, lw=0.9, ls=":")
    ax_m.set_ylabel("|T| (dB)")
    ax_p.set_ylabel("∠T (deg)")
    ax_p.set_xlabel(FREQ_LABEL)
    ax_p.set_xlim(f[0], f[-1])
    # a delay sends the phase down without end; keep the view on the region margins are read in
    ax_p.set_ylim(max(p_lo - 15.0, -450.0), min(p_hi + 15.0, 180.0))
    phase_ticks(ax_p)
    ax_m.legend(loc="lower left", fontsize=8.5)
    ax_m.set_title(title or "Loop gain and margins")
    # labels last, each where it hides no curve
    for ax, lab, color in ((ax_p, pm_label, style.TARGET), (ax_m, gm_label, style.WARN)):
        if lab is not None:
            free_annotation(ax, lab[0], lab[1], color=color, fontsize=9.5, fontweight="bold", bbox=_LABEL_BOX)
    if not (math.isfinite(fg) and math.isfinite(gm)):
        free_note(ax_m, "gain margin not defined:\nno phase crossing in view", fontsize=9, bbox=_NOTE_BOX,
                  prefer=("upper right", "lower right", "upper left"))
    verdict = "closed loop stable" if margins.closed_loop_stable else "CLOSED LOOP UNSTABLE"
    free_note(ax_p, f"{verdict}\nmodulus margin {sig(margins.modulus_margin)}", fontsize=9, bbox=_NOTE_BOX,
              prefer=("lower left", "upper right", "lower right", "upper left"))
    return fig


@styled
def nyquist(loop: Any, margins: Margins, *, title: str | None = None, half_width: float | None = None
            ) -> Figure:
    """Nyquist plot of T near −1 with the modulus-margin circle.

    The circle is centred on −1 with radius min|1 + T| (the modulus margin);
    the curve touches it where the loop comes closest to −1.

    Parameters
    ----------
    loop
        Loop gain: PlantModel, FrequencyResponse or callable of freq_hz.
    margins
        Its margins.
    half_width
        Half-width of the view around −1 (default from the modulus margin).

    Returns
    -------
    Figure
        One square axes: real part and imaginary part of T (V/V).
    """
    lo, hi = loop_band(margins, loop, decades=3.0)
    f, h = sampled(loop, lo, hi, 800)
    mm = margins.modulus_margin
    closest = None
    w = half_width or max(2.0, 2.2 * mm if math.isfinite(mm) else 2.0)
    fig = new_figure(6.4, 6.2)
    ax = fig.add_subplot(1, 1, 1)
    ax.plot(h.real, h.imag, "-", color=style.MODEL, lw=2.0, label="T(j2πf), f > 0")
    ax.plot(h.real, -h.imag, "--", color=style.SPREAD, lw=1.2, label="mirror, f < 0")
    # direction of increasing frequency: one arrow on the drawn part nearest −1
    d = np.abs(h + 1)
    i = int(np.clip(np.argmin(d), 1, len(h) - 2))
    ax.annotate("", xy=(h[i + 1].real, h[i + 1].imag), xytext=(h[i - 1].real, h[i - 1].imag),
                arrowprops={"arrowstyle": "-|>", "color": style.MODEL, "lw": 1.5, "mutation_scale": 16})
    ax.add_patch(Circle((0, 0), 1.0, fill=False, ls=":", color="#777777", lw=1.0, label="|T| = 1"))
    if math.isfinite(mm) and mm > 0:
        ax.add_patch(Circle((-1, 0), mm, fill=False, ls="--", color=style.WARN, lw=1.8,
                            label=f"modulus margin {sig(mm)}"))
        fm = margins.modulus_freq_hz
        if math.isfinite(fm):
            tm = complex(h[int(np.argmin(np.abs(np.log10(f) - np.log10(fm))))])
            ax.plot([-1, tm.real], [0, tm.imag], "-", color=style.WARN, lw=1.2)
            ax.plot([tm.real], [tm.imag], "o", color=style.WARN, ms=6)
            closest = (f"closest at {eng(fm, 'Hz')}", (tm.real, tm.imag))
    ax.plot([-1], [0], "P", color=style.WARN, ms=11, mec="white", mew=1.0, zorder=8, label="−1")
    ax.axhline(0, color="#555555", lw=0.8)
    ax.axvline(0, color="#555555", lw=0.8)
    ax.set_xlim(-1 - w, -1 + w)
    ax.set_ylim(-w, w)
    ax.set_aspect("equal", adjustable="box")
    ax.set_xlabel("Re T (V/V)")
    ax.set_ylabel("Im T (V/V)")
    ax.legend(loc="upper right", fontsize=8.5)
    ax.set_title(title or "Nyquist plot near −1")
    ms_db = 20 * math.log10(margins.peak_sensitivity) if margins.peak_sensitivity > 0 else math.nan
    if closest is not None:
        free_annotation(ax, closest[0], closest[1], color=style.WARN, fontsize=9, bbox=_LABEL_BOX)
    free_note(ax, f"peak sensitivity Ms {sig(margins.peak_sensitivity)} ({db(ms_db)})", fontsize=9,
              bbox=_NOTE_BOX, prefer=("lower left", "upper left", "lower right"))
    return fig


@styled
def crossing_view(plant: Any, compensator: Any, *, target_crossover_hz: float | None = None,
                  achieved_crossover_hz: float | None = None, band_hz: tuple[float, float] | None = None,
                  reference_compensator: Any = None, crossing_hz: float | None = None,
                  rate_of_closure: float | None = None, title: str | None = None) -> Figure:
    """Plant gain and the compensator's 1/beta on one log-log plot, crossing marked.

    The loop crosses over where ``|P·H| = 1/|C|``; the rate of closure written
    there is ``slope(1/|C|) − slope(|P·H|)`` in dB/decade
    (:func:`benchfit.loop.closure.rate_of_closure_db`).  A report passes the
    figure it quotes elsewhere (``crossing_hz``, ``rate_of_closure``) so the
    picture shows that very number.

    Parameters
    ----------
    plant
        Plant times sensing (P·H): PlantModel, FrequencyResponse or callable.
    compensator
        Compensator C (snapped parts): PlantModel or callable.
    target_crossover_hz, achieved_crossover_hz
        Drawn as vertical lines when given.
    band_hz
        Frequency band to draw (default: the plant sweep's band, or three
        decades either side of the crossover).
    reference_compensator
        Optional second compensator drawn dashed (ideal parts).
    crossing_hz, rate_of_closure
        Where the crossing is and its rate of closure (dB/decade); found on the
        drawn curves and computed from ``plant`` and ``compensator`` when None.

    Returns
    -------
    Figure
        One axes: gain (dB) against frequency (Hz).
    """
    if band_hz is None:
        if isinstance(plant, FrequencyResponse):
            band_hz = (plant.f_min_hz, plant.f_max_hz)
        else:
            centre = achieved_crossover_hz or target_crossover_hz or 1e3
            band_hz = (centre / 1e3, centre * 1e3)
    f, hp = sampled(plant, *band_hz, 300)
    hc = np.asarray(compensator.response(f) if hasattr(compensator, "response") else compensator(f))
    p_db = 20 * np.log10(np.abs(hp))
    inv_beta_db = -20 * np.log10(np.abs(hc))
    fig = new_figure(8.0, 5.2)
    ax = fig.add_subplot(1, 1, 1)
    log_axis(ax)
    is_data = isinstance(plant, FrequencyResponse)
    ax.plot(f, p_db, ".-" if is_data else "-", ms=3, color=style.BLACK, lw=2.0,
            label="plant gain |P·H| (plant × sensing)")
    ax.plot(f, inv_beta_db, "-", color=style.MODEL, lw=2.0,
            label="1/beta = 1/|compensator| (snapped parts)")
    if reference_compensator is not None:
        hr = np.asarray(reference_compensator.response(f) if hasattr(reference_compensator, "response")
                        else reference_compensator(f))
        ax.plot(f, -20 * np.log10(np.abs(hr)), "--", color=style.SECOND, lw=1.5,
                label="1/beta (ideal parts)")
    label = None
    xc = crossing_hz if crossing_hz is not None and math.isfinite(crossing_hz) else None
    if xc is None:
        diff = p_db - inv_beta_db
        idx = np.flatnonzero((diff[:-1] > 0) & (diff[1:] <= 0))
        if idx.size == 0:
            idx = np.flatnonzero(np.sign(diff[:-1]) != np.sign(diff[1:]))
        if idx.size:
            # the falling crossing closest to the achieved (or target) crossover
            ref = achieved_crossover_hz or target_crossover_hz
            i = int(idx[np.argmin(np.abs(np.log10(f[idx]) - math.log10(ref)))] if ref else idx[-1])
            t = diff[i] / (diff[i] - diff[i + 1])
            xc = float(10 ** (np.log10(f[i]) + t * (np.log10(f[i + 1]) - np.log10(f[i]))))
    if xc is not None:
        roc = rate_of_closure if rate_of_closure is not None else rate_of_closure_db(plant, compensator, xc)
        yc = _interp_log(f, p_db, xc)
        ax.plot([xc], [yc], "o", ms=10, mfc="white", mec=style.WARN, mew=2.2, zorder=8)
        label = (f"crossing at {eng(xc, 'Hz')}\nrate of closure {db_per_decade(roc)}", (xc, yc))
    if target_crossover_hz:
        ax.axvline(target_crossover_hz, color=style.TARGET, ls="--", lw=1.4,
                   label=f"target crossover {eng(target_crossover_hz, 'Hz')}")
    if achieved_crossover_hz:
        ax.axvline(achieved_crossover_hz, color=style.MODEL, ls=":", lw=1.4,
                   label=f"achieved crossover {eng(achieved_crossover_hz, 'Hz')}")
    finite = np.concatenate([p_db[np.isfinite(p_db)], inv_beta_db[np.isfinite(inv_beta_db)]])
    if finite.size:
        ax.set_ylim(max(finite.min(), np.median(finite) - 90) - 5, min(finite.max(), np.median(finite) + 90) + 5)
    ax.set_xlim(f[0], f[-1])
    ax.set_xlabel(FREQ_LABEL)
    ax.set_ylabel("Gain (dB)")
    ax.legend(loc="best", fontsize=8.5)
    ax.set_title(title or "Crossing view: plant gain against 1/beta")
    if label is not None:
        free_annotation(ax, label[0], label[1], fontsize=9.5, color=style.WARN, fontweight="bold",
                        bbox={"boxstyle": "round,pad=0.3", "fc": "white", "ec": style.WARN, "alpha": 0.9})
    return fig
