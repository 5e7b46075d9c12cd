"""Plot functions: each builds a figure with the expected axes, labels and units (no image diff)."""

from __future__ import annotations

import numpy as np
import pytest

from benchfit.data import FrequencyResponse
from benchfit.fitting.model import PlantModel
from benchfit.output import style
from benchfit.output.plots import bode_fit

W = 2 * np.pi


def _labels(fig):
    return [(ax.get_xlabel(), ax.get_ylabel()) for ax in fig.axes]


def _tick_texts(ax):
    ax.figure.canvas.draw()
    return [t.get_text() for t in ax.get_xticklabels() if t.get_text()]


@pytest.mark.parametrize("value,unit,text", [
    # SI prefixes (BIPM, The International System of Units, 9th ed., 2019, table 7).
    (1e3, "", "1k"), (1e4, "", "10k"), (1e6, "", "1M"), (100.0, "", "100"),
    (4.7e3, "Ω", "4.7 kΩ"), (2.2e-9, "F", "2.2 nF"), (1e-6, "s", "1 µs"), (999.95, "", "1k"),
    (0.0, "V", "0 V"), (-3.3e-3, "A", "-3.3 mA"), (50.0, "Hz", "50 Hz"),
])
def test_engineering_text(value, unit, text):
    assert style.eng(value, unit) == text


def test_palette_is_okabe_ito():
    # Okabe & Ito (2008), Color Universal Design: the eight colours.
    assert {style.BLACK, style.ORANGE, style.SKY_BLUE, style.GREEN, style.YELLOW, style.BLUE,
            style.VERMILLION, style.PURPLE} == {"#000000", "#E69F00", "#56B4E9", "#009E73",
                                                "#F0E442", "#0072B2", "#D55E00", "#CC79A7"}


def buck_plant() -> PlantModel:
    w0, q, wz = W * 3e3, 2.0, W * 40e3
    return PlantModel(zeros=[-wz], poles=np.roots([1, w0 / q, w0 ** 2]), k=12.0 * w0 ** 2 / wz)


def noisy(model: PlantModel, f: np.ndarray, rel: float = 0.02, seed: int = 1) -> FrequencyResponse:
    rng = np.random.default_rng(seed)
    h = model.response(f) * (1 + rel * (rng.standard_normal(f.size) + 1j * rng.standard_normal(f.size)))
    return FrequencyResponse(freq_hz=f, response=h, quantity="plant")


def test_bode_fit_axes_labels_units_and_roots():
    m = PlantModel(zeros=[W * 30e3, -W * 40e3], poles=[*np.roots([1, W * 3e3 / 2, (W * 3e3) ** 2]), -W * 1e6],
                   k=1e6)
    resp = noisy(m, np.logspace(1.5, 5.7, 120))
    fig = bode_fit(resp, m)
    ax_m, ax_p, ax_r, ax_r2 = fig.axes
    assert _labels(fig) == [("", "Magnitude (dB)"), ("", "Phase (deg)"),
                            ("Frequency (Hz)", "Residual (dB)"), ("", "Residual (deg)")]
    assert ax_m.get_xscale() == "log"
    ticks = _tick_texts(ax_r)
    assert {"100", "1k", "10k", "100k"} <= set(ticks)
    # one x for the complex pair (the 1 MHz pole is outside the band), two o: LHP and RHP zero
    marks = [ln for ln in ax_m.get_lines() if ln.get_marker() in ("x", "o") and len(ln.get_xdata()) == 1]
    assert sorted(ln.get_marker() for ln in marks) == ["o", "o", "x"]
    rhp = [ln for ln in marks if ln.get_color() == style.WARN]
    assert len(rhp) == 1 and rhp[0].get_xdata()[0] == pytest.approx(30e3)
    # the measured points are the data, the model line spans the band
    meas = ax_m.get_lines()[0]
    np.testing.assert_allclose(meas.get_ydata(), resp.mag_db)
    assert "1 root(s) outside" in " ".join(t.get_text() for t in ax_p.texts)


def test_bode_fit_model_phase_follows_measured_branch():
    # A plant whose phase starts near -180 deg (an inverting stage): the model curve must be on
    # the same 360-degree branch as the data, not 360 degrees away.
    m = PlantModel(zeros=[], poles=[-W * 1e3], k=-W * 1e3)
    resp = noisy(m, np.logspace(1, 5, 60), rel=0.0)
    fig = bode_fit(resp, m)
    model_line = fig.axes[1].get_lines()[1]
    assert abs(model_line.get_ydata()[0] - resp.phase_deg[0]) < 1.0


# ----- loop pictures -------------------------------------------------------------------------
def _loop():
    """A type-3 compensated buck loop from the design layer, with its margins."""
    from benchfit.loop.loopgain import Loop, LoopPlant
    from benchfit.loop.synthesis import Targets, synthesize

    b = buck_plant()   # with a 0.5 us delay, so the loop has a phase crossing and a gain margin
    lp = LoopPlant(PlantModel(zeros=b.zeros, poles=b.poles, k=b.k, delay_s=0.5e-6))
    syn = synthesize("type3", lp, Targets(crossover_hz=20e3, phase_margin_deg=55))
    loop = Loop(lp, syn.network)
    return lp, loop, loop.model(), loop.margins()


def test_loop_gain_draws_margins_where_read():
    from benchfit.output.plots import loop_gain

    _, _, T, m = _loop()
    fig = loop_gain(T, m)
    ax_m, ax_p = fig.axes
    assert (ax_m.get_ylabel(), ax_p.get_ylabel(), ax_p.get_xlabel()) == ("|T| (dB)", "∠T (deg)", "Frequency (Hz)")
    texts = " ".join(t.get_text() for ax in fig.axes for t in ax.texts)
    assert f"phase margin {m.phase_margin_deg:.1f}°" in texts
    assert f"gain margin {m.gain_margin_db:.1f} dB" in texts
    # the PM arrow starts at -180 deg and ends at angle(T(fc)) = PM - 180 (PM definition)
    arrow = [a for a in ax_p.texts if hasattr(a, "arrow_patch") and a.arrow_patch is not None][0]
    assert arrow.xy[1] == pytest.approx(m.phase_margin_deg - 180.0, abs=0.5)
    assert arrow.xyann[1] == pytest.approx(-180.0, abs=0.5)
    # every gain crossing in view is marked on the 0 dB line
    circles = [ln for ln in ax_m.get_lines() if ln.get_marker() == "o" and len(ln.get_xdata()) == 1]
    assert len(circles) == sum(c["kind"] == "gain" for c in m.crossings)
    # the plotted |T| at the crossover is 0 dB (definition of the gain crossover)
    line = ax_m.get_lines()[0]
    assert np.interp(np.log10(m.crossover_hz), np.log10(line.get_xdata()), line.get_ydata()) == \
        pytest.approx(0.0, abs=0.05)


def test_nyquist_modulus_circle_touches_the_curve():
    from matplotlib.patches import Circle

    from benchfit.output.plots import nyquist

    _, _, T, m = _loop()
    fig = nyquist(T, m)
    ax = fig.axes[0]
    assert (ax.get_xlabel(), ax.get_ylabel()) == ("Re T (V/V)", "Im T (V/V)")
    circles = [p for p in ax.patches if isinstance(p, Circle)]
    mm = [c for c in circles if tuple(c.center) == (-1, 0)][0]
    assert mm.radius == pytest.approx(m.modulus_margin)
    # the curve's closest approach to -1 equals the radius (modulus margin = min |1 + T|)
    x, y = ax.get_lines()[0].get_data()
    assert np.min(np.hypot(np.asarray(x) + 1, y)) == pytest.approx(m.modulus_margin, rel=2e-3)


def test_crossing_view_marks_crossing_and_rate_of_closure():
    from benchfit.output.plots import crossing_view

    lp, loop, _, m = _loop()
    fig = crossing_view(lp.response, loop.compensator(), target_crossover_hz=20e3,
                        achieved_crossover_hz=m.crossover_hz, band_hz=(10, 1e6))
    ax = fig.axes[0]
    assert (ax.get_xlabel(), ax.get_ylabel(), ax.get_xscale()) == ("Frequency (Hz)", "Gain (dB)", "log")
    text = " ".join(t.get_text() for t in ax.texts)
    assert "rate of closure" in text and "dB/decade" in text
    mark = [ln for ln in ax.get_lines() if ln.get_marker() == "o"][0]
    # |P·H| = 1/|C| where |T| = 1: the crossing is the loop's crossover
    assert mark.get_xdata()[0] == pytest.approx(m.crossover_hz, rel=0.01)
    # slopes: plant about -37 dB/dec there, 1/|C| about -14 -> closure between 20 and 27
    roc = float(text.split("rate of closure ")[1].split(" ")[0])
    assert 15 < roc < 30
    labels = [t.get_text() for t in ax.get_legend().get_texts()]
    assert any(t.startswith("target crossover 20 kHz") for t in labels)


# ----- predictions ---------------------------------------------------------------------------
def test_spread_histograms_counts_targets_and_yield():
    from benchfit.output.plots import spread_histograms

    rng = np.random.default_rng(0)
    pm = rng.normal(55, 3, 500)
    fc = 20e3 * np.exp(rng.normal(0, 0.1, 500))
    gm = np.where(np.arange(500) < 3, np.inf, rng.normal(20, 1, 500))
    fig = spread_histograms(pm, fc, gm, pm_min_deg=50, crossover_target_hz=20e3, gm_min_db=10,
                            yield_fraction=0.95)
    axes = fig.axes
    assert [ax.get_xlabel() for ax in axes] == ["Phase margin (deg)", "Crossover (Hz)", "Gain margin (dB)"]
    assert axes[0].get_ylabel() == "Draws (count)"
    assert sum(p.get_height() for p in axes[0].patches) == 500
    assert sum(p.get_height() for p in axes[2].patches) == 497
    assert "yield 95.0 %" in fig.get_suptitle()
    # said in words (issue 18 item 8): no phase crossing, so no gain margin
    assert "3 draws: no phase crossing" in " ".join(t.get_text() for t in axes[2].texts)
    assert any(ln.get_xdata()[0] == 50 for ln in axes[0].get_lines())


def test_step_response_panels_units_and_overlay():
    from benchfit.output.curves import Curve
    from benchfit.output.plots import step_response

    t = np.linspace(0, 2e-4, 201)
    step = Curve("predicted", "time_s", t, 1 - np.exp(-t / 2e-5), unit="V")
    load = Curve("load step 1 A", "time_s", t, -0.05 * np.exp(-t / 3e-5), unit="V")
    meas = Curve("scope", "time_s", t, 1 - np.exp(-t / 2.2e-5), unit="V")
    fig = step_response(step, load, measured=meas)
    a1, a2 = fig.axes
    assert a1.get_xlabel() == "Time (µs)" and a1.get_ylabel() == "Output (V)"
    assert a2.get_ylabel() == "Output deviation (V)"
    assert [ln.get_label() for ln in a1.get_lines()[:2]] == ["scope", "predicted"]
    assert a1.get_lines()[1].get_xdata()[-1] == pytest.approx(200.0)


def test_output_impedance_log_axes_and_peak():
    from benchfit.output.curves import Curve
    from benchfit.output.plots import output_impedance

    f = np.logspace(1, 6, 200)
    s = 2j * np.pi * f
    zol = 1 / (1 / (0.01 + s * 2e-6) + s * 100e-6)
    zcl = zol / (1 + 1e5 / s)
    fig = output_impedance(Curve("open", "freq_hz", f, zol, unit="ohm"),
                           Curve("closed", "freq_hz", f, zcl, unit="ohm"))
    ax = fig.axes[0]
    assert (ax.get_xscale(), ax.get_yscale()) == ("log", "log")
    assert (ax.get_xlabel(), ax.get_ylabel()) == ("Frequency (Hz)", "|Z| (Ω)")
    assert "peak" in ax.texts[0].get_text()


def test_bode_fit_takes_a_fit_result_and_quotes_its_errors():
    from benchfit.fitting import fit

    resp = noisy(buck_plant(), np.logspace(1.5, 5.7, 150), rel=0.01)
    fr = fit(resp)
    fig = bode_fit(resp, fr)
    note_text = " ".join(t.get_text() for t in fig.axes[1].texts)
    assert f"rms error {fr.stats['rms_db']:.2g} dB" in note_text
    assert "order 2" in note_text
