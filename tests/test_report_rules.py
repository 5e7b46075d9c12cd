"""The choosing rules behind the report: rate of closure, load-step size, label placement, views, names."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from matplotlib.figure import Figure

from benchfit.data.trace import TimeTrace
from benchfit.errors import InputError
from benchfit.fitting.parameters import parameter_label
from benchfit.loop.closure import rate_of_closure_db, slope_db_per_decade
from benchfit.loop.networks import network_label
from benchfit.output.assemble import load_step_size
from benchfit.output.placement import covered_samples, free_annotation, free_note
from benchfit.output.plot_predict import data_view, spread_histograms, view_with_target
from benchfit.provenance import Provenance


# ----- rate of closure ------------------------------------------------------------------
def test_rate_of_closure_of_textbook_slopes():
    # an integrator falls 20 dB/decade, a double pole 40 dB/decade above its corner (Bode asymptotes,
    # any control text); 1/beta of an integrator compensator rises 20 dB/decade.
    integ = lambda f: 1.0 / (1j * f)                      # noqa: E731
    flat = lambda f: np.full(np.shape(f), 3.0 + 0j)       # noqa: E731
    dbl = lambda f: 1.0 / (1j * f / 10.0) ** 2            # noqa: E731
    assert slope_db_per_decade(integ, 1e3) == pytest.approx(-20.0, abs=1e-9)
    assert slope_db_per_decade(dbl, 1e3) == pytest.approx(-40.0, abs=1e-9)
    # plant -20 dB/decade, flat compensator: 1/beta flat, rate of closure 20 dB/decade
    assert rate_of_closure_db(integ, flat, 5e3) == pytest.approx(20.0, abs=1e-9)
    # plant -40, integrator compensator (1/beta +20): 60 dB/decade
    assert rate_of_closure_db(dbl, integ, 5e3) == pytest.approx(60.0, abs=1e-9)
    assert np.isnan(rate_of_closure_db(integ, flat, float("nan")))


# ----- the load-step size of the prediction ----------------------------------------------
def _load_trace(di: float) -> TimeTrace:
    t = np.linspace(-1e-4, 9e-4, 2000)
    i = np.where(t >= 0, 0.5 + di, 0.5)
    v = np.where(t >= 0, -0.02 * np.exp(-t / 5e-5) * np.sin(2 * np.pi * 8e3 * np.maximum(t, 0)), 0.0)
    return TimeTrace(t, {"Iout": i, "Vout AC": v}, provenance=Provenance(step="t", sources=("load.csv",)))


def test_load_step_size_comes_from_the_current_channel():
    di, words = load_step_size(_load_trace(0.5), "Iout", None)
    assert di == pytest.approx(0.5, rel=0.02)
    assert "measured on Iout of load.csv" in words


def test_load_step_size_given_or_none():
    assert load_step_size(None, None, None) == (None, "")
    assert load_step_size(None, None, 2.0) == (2.0, "as given")
    di, words = load_step_size(_load_trace(0.5), None, 1.0)
    assert di == 1.0 and "no current channel" in words and "as given" in words
    with pytest.raises(InputError, match="not both"):
        load_step_size(_load_trace(0.5), "Iout", 1.0)


# ----- labels placed over no data ---------------------------------------------------------
def test_free_note_and_annotation_avoid_the_curve():
    fig = Figure(figsize=(6, 4))
    ax = fig.add_subplot(1, 1, 1)
    x = np.linspace(0, 1, 200)
    ax.plot(x, 1 - x)            # a diagonal from the upper left to the lower right
    ax.set_xlim(0, 1)
    ax.set_ylim(0, 1)
    note = free_note(ax, "a note\nof two lines", prefer=("upper left", "upper right", "lower left"))
    # upper left sits on the curve; upper right is free
    assert note.get_position() == pytest.approx((0.98, 0.96))
    renderer = fig.canvas.get_renderer()
    assert covered_samples(ax, note.get_window_extent(renderer)) == 0
    ann = free_annotation(ax, "crossing\nhere", (0.5, 0.5))
    assert covered_samples(ax, ann.get_window_extent(renderer)) == 0


# ----- histogram views ----------------------------------------------------------------------
def test_histogram_view_is_the_datas_and_a_far_target_is_an_arrow():
    assert data_view(32.0, 34.0, log=False) == pytest.approx((31.88, 34.12))
    # a near target widens the view, a far one does not
    assert view_with_target((31.9, 34.1), 31.0, log=False)[0] < 31.0
    assert view_with_target((31.9, 34.1), 10.0, log=False) == (31.9, 34.1)
    rng = np.random.default_rng(1)
    fig = spread_histograms(rng.normal(57, 0.5, 400), rng.normal(19.6e3, 300, 400), rng.normal(32.8, 0.2, 400),
                            pm_min_deg=55, crossover_target_hz=20e3, gm_min_db=10, yield_fraction=1.0)
    gm_ax = fig.axes[2]
    lo, hi = gm_ax.get_xlim()
    assert lo > 30 and hi < 35          # scaled to its own draws, not stretched to 10 dB
    assert any("minimum 10.0 dB" in t.get_text() and "←" in t.get_text() for t in gm_ax.texts)
    for ax in fig.axes:
        assert ax.get_xlabel().endswith(")")     # every axis has its unit


# ----- names a person reads -----------------------------------------------------------------
def test_readable_names():
    assert network_label("type3") == "Type III" and network_label("pi") == "PI"
    assert parameter_label("pair1_f0_hz") == "pole pair 1, natural frequency"
    assert parameter_label("zero_pair2_q") == "zero pair 2, Q"
    assert parameter_label("pole3_hz") == "real pole 3" and parameter_label("delay_s") == "delay"


def test_check_tolerances_order_of_evidence():
    from dataclasses import replace

    from benchfit.loop.checkdefaults import FALLBACK_TOLERANCES, check_tolerances
    from benchfit.loop.designresult import Design

    d = Design.from_dict(_small_design().to_dict())      # as read from a design file
    assert check_tolerances(d, (0.02, 0.2)).source == "given with --tolerance"
    own = check_tolerances(d)
    assert (own.r_tol, own.c_tol, own.seed) == (d.spread.r_tol, d.spread.c_tol, d.spread.seed)
    bare = replace(d, spread=None)
    # no Monte Carlo: the series' own tolerances (IEC 60063: E24 parts are the ±5 % series, E96 ±1 %)
    by_series = check_tolerances(replace(bare, provenance=replace(bare.provenance, settings={})))
    assert (by_series.r_tol, by_series.c_tol) == (0.01, 0.05) and "series" in by_series.source
    nothing = replace(bare, series={"resistor": "given", "capacitor": "given"},
                      provenance=replace(bare.provenance, settings={}))
    assert (check_tolerances(nothing).r_tol, check_tolerances(nothing).c_tol) == FALLBACK_TOLERANCES
    assert "records no tolerances" in check_tolerances(nothing).source


def _small_design():
    from benchfit.fitting.model import PlantModel
    from benchfit.loop.design import design
    from benchfit.loop.loopgain import LoopPlant
    from benchfit.loop.sensing import Sensing
    from benchfit.loop.synthesis import Targets

    wn = 2 * np.pi * 5e3
    plant = PlantModel(zeros=np.array([]), poles=np.array([-0.2 * wn + 1j * wn, -0.2 * wn - 1j * wn]),
                       k=12 * wn ** 2)
    lp = LoopPlant(plant, Sensing.divider(10e3, 3.24e3), band_hz=(10.0, 1e6))
    return design(lp, "type3", Targets(crossover_hz=20e3, phase_margin_deg=55, gain_margin_db=10),
                  series=("E96", "E24"), draws=200, seed=7)


# ----- what is not defined, said in words ------------------------------------------------------
SAMPLES = Path(__file__).resolve().parents[1] / "sample_data"


def test_margins_text_says_why_the_gain_margin_is_not_defined(capsys):
    from benchfit.cli import main

    assert main(["margins", str(SAMPLES / "ldo_loop.csv")]) == 0
    out = capsys.readouterr().out
    assert "gain margin     not defined: no phase crossing (∠T = −180°) below 2 MHz" in out
    assert "n/a" not in out and "none at" not in out


def test_step_text_says_why_the_log_decrement_is_not_defined():
    from benchfit.steps.result import _ringing_text

    freq, dec = _ringing_text(float("nan"), float("nan"), 1)
    assert dec == "not defined: only 1 ringing lobe above the noise; it needs two"
    assert "nan" not in freq + dec
    assert _ringing_text(8e3, 0.9, 4) == ("8 kHz", "0.9 (from 4 lobes)")


# ----- the safety caution and the K-factor reference ---------------------------------------------
ROOT = Path(__file__).resolve().parents[1]


@pytest.mark.parametrize("command", ["capture", "scope"])
def test_help_of_live_measurements_carries_the_caution(command, capsys):
    from benchfit.cli import main
    from benchfit.safety import CAUTION

    assert main([command, "--help"]) == 0
    out = " ".join(capsys.readouterr().out.split())
    assert CAUTION in out and "README.md (Safety)" in out and "docs/capture.md" in out


def test_docs_carry_the_caution_and_the_full_reference():
    from benchfit.output.report import SAFETY_NOTE
    from benchfit.safety import CAUTION

    assert SAFETY_NOTE == CAUTION
    steps = (ROOT / "docs" / "steps.md").read_text(encoding="utf-8")
    assert "**Safety.**" in steps and "capture.md" in steps and "README" in steps
    design_doc = " ".join((ROOT / "docs" / "design.md").read_text(encoding="utf-8").split())
    # the reference as tests/test_synthesis.py gives it
    assert ('H. Dean Venable, "The K factor: a new mathematical tool for stability analysis and '
            'synthesis", Proceedings of Powercon 10, 1983') in design_doc


def test_predicted_frequency_curves_cover_the_measured_band(tmp_path, capsys):
    """`predict --curve loop` writes the plant's band and says so (was 5.6e-05 Hz to 2e+08 Hz)."""
    from benchfit.cli import main
    from benchfit.output.curves import read_curve_csv

    d = _small_design()
    d.to_json(tmp_path / "design.json")
    assert main(["predict", str(tmp_path / "design.json"), "--curve", "loop", "-o", str(tmp_path / "c.csv")]) == 0
    out = capsys.readouterr().out
    c = read_curve_csv(tmp_path / "c.csv")
    assert c.x[0] >= 10.0 and c.x[-1] <= 1e6 and c.x.size > 100
    assert "(the plant's measured band)" in out and "e+" not in out


def test_simulated_scope_keeps_the_replayed_channels_name(tmp_path, capsys):
    """`scope --simulate FILE --sim-channel CH2` stores CH2 (it stored CH1), and says what it replayed."""
    from benchfit.cli import main
    from benchfit.cli.cmd_scope import replay_channel_name
    from benchfit.data import read_trace

    assert replay_channel_name("ch2") == "CH2" and replay_channel_name("Vout AC") == "CH1"
    assert replay_channel_name(None) == "CH1"
    out = tmp_path / "t.csv"
    assert main(["scope", "--simulate", str(SAMPLES / "step_trace.csv"), "--sim-channel", "CH2",
                 "-o", str(out)]) == 0
    assert read_trace(out).names == ["CH2"]
    assert "replaying CH2 of" in capsys.readouterr().out


def test_batch_histograms_are_labelled_with_units():
    from benchfit.batch.summary import histogram_figure

    rng = np.random.default_rng(3)
    rows = [{"status": "pass", "phase_margin_deg": float(rng.normal(55, 2)),
             "crossover_hz": float(rng.normal(20e3, 500)), "modulus_margin": float(rng.normal(0.8, 0.02)),
             "param:pair1_f0_hz": float(rng.normal(5062, 20))} for _ in range(40)]
    fig = histogram_figure(rows)
    fig.canvas.draw()
    shown = [ax for ax in fig.axes if ax.get_visible()]
    assert [ax.get_xlabel() for ax in shown] == ["Phase margin (deg)", "Crossover (Hz)", "Modulus margin (ratio)",
                                                "Pole pair 1, natural frequency (Hz)"]
    for ax in shown:
        assert "_" not in ax.get_title() and ax.get_ylabel() == "Units (count)"
        assert ax.xaxis.get_offset_text().get_text() == ""      # no '+2e4' offset on the ticks
    ticks = [t.get_text() for t in shown[1].get_xticklabels() if t.get_text()]
    assert any(t.endswith("k") for t in ticks)                   # 19.5k, 20k: prefixes


def test_report_command_matches_the_load_step_to_the_current_channel(tmp_path):
    """`report --load-current-channel Iout`: the caption says the measured current step is the size."""
    from benchfit.cli import main
    from benchfit.data import read_sweep
    from benchfit.fitting import fit

    d = _small_design()
    d.to_json(tmp_path / "design.json")
    fit(read_sweep(SAMPLES / "buck_zout.csv")).to_json(tmp_path / "zout.json")
    html_path = tmp_path / "r.html"
    assert main(["report", str(tmp_path / "design.json"), "-o", str(html_path), "--zout", str(tmp_path / "zout.json"),
                 "--load-trace", str(SAMPLES / "load_step_trace.csv"), "--load-channel", "Vout AC",
                 "--load-current-channel", "Iout"]) == 0
    page = html_path.read_text(encoding="utf-8")
    assert "load step: 500 mA, the current step measured on Iout of load_step_trace.csv" in page
    assert "measured load step" in page


def test_unknown_current_channel_names_the_option():
    with pytest.raises(InputError, match="no channel 'Ix'") as e:
        load_step_size(_load_trace(0.5), "Ix", None)
    assert e.value.source == "--load-current-channel"
