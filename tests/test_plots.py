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
    (4.7e3, "Ω", "4.7kΩ"), (2.2e-9, "F", "2.2nF"), (1e-6, "s", "1µs"), (999.95, "", "1k"),
    (0.0, "V", "0V"), (-3.3e-3, "A", "-3.3mA"),
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
