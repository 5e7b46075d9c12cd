"""Verdicts, margins and yields against outside references on loops with known truth.

References (named at each check): python-control 0.10 ``stability_margins``
(every crossing, on the true transfer function or a dense frequency-response
evaluation of the true loop, delay exact) and the closed-loop poles of
``control.feedback`` (delay as a Padé approximant); an independent Monte
Carlo written in tests/verdict_cases.py (same draws, same parts, textbook
compensator, python-control margins, no slack).
"""

import math
import re
import warnings

import control
import numpy as np
import pytest
from verdict_cases import (
    compensator_tf,
    control_tf,
    double_integrator_loop,
    frequency_scale,
    independent_yield,
    noisy,
    random_loops,
    servo_plant,
    true_crossings,
    true_stable,
)

from benchfit.fitting.model import PlantModel
from benchfit.loop.asymptote import choose_integrators, fit_asymptote
from benchfit.loop.design import check_parts, design
from benchfit.loop.loopgain import Loop, LoopPlant
from benchfit.loop.margins import margins_from_data, margins_of_model
from benchfit.loop.marginsbatch import margins_batch
from benchfit.loop.synthesis import Targets
from benchfit.loop.tolerance import monte_carlo
from benchfit.loop.verdict import agreed_verdict, negative_count


# ----------------------------------------------------------------------------- item 1
def test_double_integrator_sweep_is_stable_with_two_integrators_on_every_seed():
    # the reported case: 801 log points 10 Hz-100 kHz, 0.1 dB / 0.5 deg noise
    model = double_integrator_loop()
    f = np.logspace(1, 5, 801)
    stable, _ = true_stable(model)                 # python-control closed-loop poles
    assert stable
    pm_ref, wgc, _, _ = true_crossings(model, 10, 1e5)   # python-control stability_margins
    assert pm_ref.size == 1 and wgc[0] == pytest.approx(1500, rel=0.01)
    rows = []
    for seed in range(10):
        m = margins_from_data(f, noisy(model.response(f), 0.1, 0.5, seed))
        assert m.verdict == "stable" and m.closed_loop_stable, (seed, m.warnings)
        assert m.integrators == 2, (seed, m.integrators_evidence)
        assert not any("asymptote" in w for w in m.warnings), m.warnings
        # 0.5 deg of phase noise per point: the interpolated PM is within 2 deg of the truth
        assert m.phase_margin_deg == pytest.approx(pm_ref[0], abs=2.0)
        rows.append(np.abs(noisy(model.response(f), 0.1, 0.5, seed)))
    # the same rows at once (the Monte Carlo path) give the same verdicts
    T = np.array([noisy(model.response(f), 0.1, 0.5, s) for s in range(10)])
    b = margins_batch(f, T)
    assert list(b["verdict"]) == ["stable"] * 10 and list(b["integrators"]) == [2] * 10


def test_delay_loop_has_no_false_asymptote_warning():
    # T = K e^(-sτ)/s(1+s/ω20k): the delay already turns the phase at the bottom of the band;
    # the fitted asymptote carries it back instead of calling it a missing asymptote
    from benchfit.fitting.model import PlantModel

    tau = 40e-6
    model = PlantModel(zeros=np.array([]), poles=np.array([0.0, -2 * math.pi * 20e3]),
                       k=2 * math.pi * 1e3 * 2 * math.pi * 20e3, delay_s=tau)
    f = np.logspace(1.5, 5, 700)
    pm_ref, _, _, _ = true_crossings(model, 30, 1e5)       # python-control, dense true loop
    assert true_stable(model)[0]                            # python-control, Padé poles
    for seed in range(5):
        m = margins_from_data(f, noisy(model.response(f), 0.1, 0.5, seed))
        assert m.verdict == "stable" and m.integrators == 1, m.integrators_evidence
        assert not any("asymptote" in w for w in m.warnings), m.warnings
        assert m.phase_margin_deg == pytest.approx(pm_ref[0], abs=2.0)


def test_random_loops_verdicts_and_margins_match_python_control():
    # >= 20 loops, 0-2 integrators, resonances of Q 5-30, delays (tests/verdict_cases.py)
    loops = random_loops(24, 7)
    f = np.logspace(1, 5.5, 2500)
    seen = {"stable": 0, "unstable": 0}
    for i, model in enumerate(loops):
        stable, rel = true_stable(model)                    # python-control closed-loop poles
        if abs(rel) < 2e-3:
            continue                                        # the truth itself is marginal
        truth = "stable" if stable else "unstable"
        seen[truth] += 1
        pm_ref, wgc, gm_ref, wpc = true_crossings(model, 10, 10 ** 5.5)   # python-control
        mm = margins_of_model(model)
        assert mm.verdict == truth, i
        gains = sorted((c["freq_hz"], c["value"]) for c in mm.crossings if c["kind"] == "gain")
        assert len(gains) == pm_ref.size, i
        for (fx, pm), fr, pr in zip(gains, np.sort(wgc), pm_ref[np.argsort(wgc)], strict=True):
            assert fx == pytest.approx(fr, rel=1e-3) and pm == pytest.approx(pr, abs=0.02), i
        phases = {round(c["freq_hz"], 6): c["value"] for c in mm.crossings if c["kind"] == "phase"}
        for fr, gr in zip(wpc, gm_ref, strict=True):
            if gr < 40:                                     # resolved part of the dense grid
                near = min(phases, key=lambda k, fr=fr: abs(math.log(k / fr)))
                assert phases[near] == pytest.approx(gr, abs=0.02), i
        # a sampled sweep of the same loop: exact and noisy
        exact = margins_from_data(f, model.response(f))
        assert exact.verdict == truth, (i, exact.integrators_evidence)
        assert exact.integrators == int(np.sum(model.poles == 0)), i
        assert exact.phase_margin_deg == pytest.approx(mm.phase_margin_deg, abs=0.2), i
        meas = margins_from_data(f, noisy(model.response(f), 0.05, 0.3, i))
        assert meas.verdict == truth, (i, meas.integrators_evidence)
    assert seen["stable"] >= 5 and seen["unstable"] >= 3, seen


def test_undecided_low_end_is_said_and_never_counted_stable():
    # a short sweep that starts on a corner: its low end allows several integrator counts
    v = agreed_verdict(np.array([[0, 2], [0, 0], [1, 1], [0, 2]]),
                       np.array([[True, True], [True, False], [True, True], [True, False]]))
    assert list(v) == ["undecided", "stable", "unstable", "stable"]
    assert agreed_verdict(np.array([[0]]), np.array([[False]]))[0] == "undecided"


def test_a_negative_closed_loop_pole_count_is_undecided_never_unstable():
    # Z = P - N < 0 is impossible (Nyquist: Z counts closed-loop RHP poles, Z >= 0): a count
    # giving it means inconsistent data, so the row is undecided even if another count is sure
    z = np.array([[-5, 0], [0, -2], [2, 3], [-1, -1]])
    pl = np.array([[True, False], [True, True], [True, True], [True, True]])
    assert list(agreed_verdict(z, pl)) == ["undecided", "undecided", "unstable", "undecided"]
    assert list(negative_count(z, pl)) == [True, True, False, True]
    # a loop gain recovered from a noisy closed-loop sweep: T = Gbeta/(1-Gbeta) for
    # A = 1e5/((1+s/w50)(1+s/w3M)), beta = 0.4, 0.1 % noise; |T| ~ 4e4 at the low end is noise
    # (random phase), so the encirclement count there means nothing.  python-control on the true
    # loop says stable (checked in test_loop_recovery.py); the raw count must never be negative.
    f = np.logspace(1, 7, 401)
    s = 2j * np.pi * f
    A = 1e5 / ((1 + s / (2 * np.pi * 50)) * (1 + s / (2 * np.pi * 3e6)))
    G = A / (1 + 0.4 * A)
    rng = np.random.default_rng(7)
    inconsistent = 0
    for _ in range(8):
        g = G * np.exp(1e-3 * (rng.standard_normal(f.size) + 1j * rng.standard_normal(f.size)))
        x = 0.4 * g
        m = margins_from_data(f, x / (1 - x))
        assert not any(re.search(r"UNSTABLE: -\d", w) for w in m.warnings), m.warnings
        if m.encirclements > m.open_loop_unstable_poles:
            inconsistent += 1
            assert m.verdict == "undecided"
            assert any("negative number of closed-loop" in w for w in m.warnings)
    assert inconsistent >= 1      # the noise does give such counts (seed 7: -5 on the first)


def test_choose_integrators_weighs_slope_and_phase_together():
    # the best whole n must fit (chi2 <= 13.8) and beat every other by 10 (rows at once)
    chi2 = np.array([[50.0, 1.0, 40.0, 90.0, 99.0],        # decided: 1
                     [50.0, 3.0, 8.0, 90.0, 99.0],         # 1 and 2 both fit
                     [500.0, 300.0, 400.0, 900.0, 990.0]])  # nothing fits: slope 1.5 opens 1, 2
    best, decided, plausible = choose_integrators(chi2, np.array([1.01, 1.4, 1.5]),
                                                  np.array([0.01, 0.01, 0.01]))
    assert list(best) == [1, 1, 1] and list(decided) == [True, False, False]
    assert [list(np.flatnonzero(p)) for p in plausible] == [[1], [1, 2], [1, 2]]
    # a slope within 0.02 of a whole n does not open its neighbours
    _, _, p = choose_integrators(chi2[2:], np.array([1.00003]), np.array([5e-5]))
    assert list(np.flatnonzero(p[0])) == [1]
    # the fit itself: a clean -40 dB/decade, -180 deg low end over more than a decade
    f = np.logspace(0, 2, 200)
    fit = fit_asymptote(f, 1e4 / (2j * np.pi * f) ** 2)[0]
    assert fit.decided and fit.n == 2 and fit.slope_n == pytest.approx(2, abs=1e-6)


def test_choose_integrators_lets_the_phase_decide_when_the_slope_has_not_settled():
    # nothing fits (chi2 of the best > 13.8): the phase range and the rescaled chi2 decide
    chi2 = np.array([[384.0, 8.3e6, 2.1e6, 1.3e7, 8.6e6],          # slope 0.02, phase 0 deg
                     [78412.0, 1189.0, 70938.0, 1.97e5, 4.7e5]])   # slope 1.04, phase -74 deg
    slope, ssig = np.array([0.0216, 1.037]), np.array([0.0014, 0.0044])
    best, decided, pl = choose_integrators(chi2, slope, ssig, np.array([0.0, 74 / 90]),
                                           np.array([1e-4, 1e-3]))
    assert [list(np.flatnonzero(p)) for p in pl] == [[0], [0, 1]]
    # without the phase the slope alone opens 1 on the first row (the old answer "0 or 1")
    _, _, pl0 = choose_integrators(chi2, slope, ssig)
    assert list(np.flatnonzero(pl0[0])) == [0, 1]


@pytest.mark.parametrize("start_hz, noise", [(10, 0.0), (10, 0.003), (10, 0.01), (300, 0.0)])
def test_type0_loop_verdict_and_margins_match_python_control(start_hz, noise):
    # T = 5/((1+s/w100)(1+s/w2k)(1+s/w5k)): python-control stability_margins gives PM 83.2 deg,
    # GM 23.5 dB, and the closed-loop poles (control.feedback) are in the left half-plane
    import control

    s_ = control.tf("s")
    def w(x):
        return 2 * np.pi * x

    true = 5 / ((1 + s_ / w(100)) * (1 + s_ / w(2e3)) * (1 + s_ / w(5e3)))
    gm, pm, _, _ = control.margin(true)
    assert np.all(np.real(control.poles(control.feedback(true, 1))) < 0)
    f = np.logspace(np.log10(start_hz), 5, 401)
    t = np.array([complex(true(2j * np.pi * x)) for x in f])
    rng = np.random.default_rng(3)
    if noise:
        t = t * np.exp(noise * (rng.standard_normal(f.size) + 1j * rng.standard_normal(f.size)))
    m = margins_from_data(f, t)
    assert m.verdict == "stable", m.integrators_evidence
    if start_hz == 10:
        assert m.integrators == 0 and " 1 " not in m.integrators_evidence.split("(")[0]
    else:     # from 300 Hz the slope looks like one integrator; the phase keeps 0 in play
        assert "0" in m.integrators_evidence.split("(")[0]
    assert m.phase_margin_deg == pytest.approx(pm, abs=0.5)
    assert m.gain_margin_db == pytest.approx(20 * np.log10(gm), abs=0.3)


# ----------------------------------------------------------------------------- items 2, 3, 5
def _servo_design(fc, gm_target=6.0):
    lp = LoopPlant(servo_plant(), band_hz=(1, 100e3))
    return lp, design(lp, "pi", Targets(fc, 50, gm_target), draws=0)


@pytest.mark.parametrize("gm_target", [None, 0.3, -0.3])
def test_servo_yield_matches_an_independent_monte_carlo(gm_target):
    # a gain-margin target at and near the nominal GM (set by the Q = 15 resonance)
    lp, d = _servo_design(120.0)
    nominal = d.snapped.worst_margins()
    assert len([c for c in nominal.crossings if c["kind"] == "gain"]) == 1
    gm_t = nominal.gain_margin_db + (gm_target or 0.0)
    targets = Targets(120.0, 40.0, gm_t)
    draws, seed = 200, 11
    s = monte_carlo(lp, d.snapped.network, None, targets, r_tol=0.01, c_tol=0.05,
                    draws=draws, seed=seed)
    ref, _, gm_w = independent_yield(servo_plant(), "pi", d.snapped.network.parts, 40.0, gm_t,
                                     0.01, 0.05, draws, seed)
    # draws within 0.01 dB of the target may fall either way between two exact evaluations
    edge = int(np.sum(np.abs(gm_w - gm_t) < 0.01))
    assert abs(s.yield_fraction - ref) * draws <= edge, (s.yield_fraction, ref, edge)


def test_servo_reference_in_scaled_s_has_no_overflow_and_the_true_margins():
    # The analytic reference (12th-order Padé × resonance × PI) written in s̃ = s/ω0:
    # python-control's margin finder overflowed on the unscaled polynomials (RuntimeWarning
    # in polyval).  It must now run with RuntimeWarning as an error and give the margins of
    # the other reference path, python-control on the dense frequency response with the
    # delay exact (true_crossings), the loop being the same.
    lp, d = _servo_design(120.0)
    parts = d.snapped.network.parts
    plant = servo_plant()
    w0 = frequency_scale(plant)
    with warnings.catch_warnings():
        warnings.simplefilter("error", RuntimeWarning)
        loop = control_tf(plant, 12, w0) * compensator_tf("pi", parts, w0)
        gm, pm, _sm, wpc, wgc, _wms = control.stability_margins(loop, returnall=True)
        ref, _, _ = independent_yield(plant, "pi", parts, 40.0, 0.0, 0.01, 0.05, 5, 1)
    assert 0.0 <= ref <= 1.0
    c = compensator_tf("pi", parts)
    true = PlantModel(zeros=np.concatenate([plant.zeros, np.roots(np.ravel(c.num[0][0]))]),
                      poles=np.concatenate([plant.poles, np.roots(np.ravel(c.den[0][0]))]),
                      k=plant.k * float(np.ravel(c.num[0][0])[0] / np.ravel(c.den[0][0])[0]),
                      delay_s=plant.delay_s)
    pm_ref, wgc_ref, gm_ref, wpc_ref = true_crossings(true, 1.0, 100e3)
    wgc_hz = np.sort(np.asarray(wgc) * w0 / (2 * np.pi))
    np.testing.assert_allclose(wgc_hz, np.sort(wgc_ref), rtol=2e-3)
    np.testing.assert_allclose(np.sort(np.asarray(pm)), np.sort(pm_ref), atol=0.2)
    # phase crossings below 10 kHz (ωτ < 9.4 rad, where a 12th-order Padé still holds the delay)
    wpc_hz = np.asarray(wpc) * w0 / (2 * np.pi)
    low = np.sort(20 * np.log10(np.asarray(gm)[wpc_hz < 10e3]))
    assert low.size >= 2
    np.testing.assert_allclose(low, np.sort(np.asarray(gm_ref)[np.asarray(wpc_ref) < 10e3]), atol=0.05)


def test_servo_second_crossing_counts_for_the_yield_and_targets_met():
    # automatic crossover judged on the main crossover only (crossings="main", for synthesis,
    # snapping and targets_met alike): the chosen loop lets the resonance cross 0 dB again with
    # a negative phase margin.  Counting every crossing (the default), the same parts miss.
    lp = LoopPlant(servo_plant(), band_hz=(1, 100e3))
    d = design(lp, "pi", Targets(None, 50, 6), draws=0, crossings="main")
    m = d.snapped.worst_margins()
    gains = [c for c in m.crossings if c["kind"] == "gain"]
    assert len(gains) >= 2 and min(c["value"] for c in gains) < 0
    assert d.targets_met                      # by the rule it was designed to
    every = check_parts(lp, d.snapped.network, targets=d.targets)
    assert not every.targets_met
    assert any("at the" in w and "crossing is below" in w for w in every.warnings), every.warnings
    s_all = monte_carlo(lp, d.snapped.network, None, d.targets, r_tol=0.01, c_tol=0.05,
                        draws=200, seed=3)
    s_main = monte_carlo(lp, d.snapped.network, None, d.targets, r_tol=0.01, c_tol=0.05,
                         draws=200, seed=3, crossings="main")
    ref, _, _ = independent_yield(servo_plant(), "pi", d.snapped.network.parts, 50.0, 6.0,
                                  0.01, 0.05, 200, 3)
    assert s_all.yield_fraction == pytest.approx(ref, abs=0.02)
    assert s_all.yield_fraction < s_main.yield_fraction


def test_no_slack_a_margin_just_short_misses_its_target():
    lp, d = _servo_design(120.0)
    m = d.snapped.worst_margins()
    just_above = Targets(120.0, 40.0, m.gain_margin_db + 0.004)
    # the same parts judged against a target 0.004 dB above their gain margin
    d2 = check_parts(lp, d.snapped.network, targets=just_above)
    assert not d2.targets_met
    msg = [w for w in d2.warnings if w.startswith("given parts: gain margin")]
    # the message quotes the table's own number, with the decimals that show the shortfall
    assert msg, d2.warnings
    quoted = float(re.search(r"gain margin ([0-9.]+) dB", msg[0]).group(1))
    assert quoted < just_above.gain_margin_db
    assert quoted == pytest.approx(m.gain_margin_db, abs=0.05)   # as the table rounds it
    assert check_parts(lp, d.snapped.network,
                       targets=Targets(120.0, 40.0, m.gain_margin_db - 0.004)).targets_met
    # the Monte Carlo: zero tolerance on a target a hair above the nominal passes nothing
    s = monte_carlo(lp, d.snapped.network, None, just_above, r_tol=0.0, c_tol=0.0, draws=10,
                    seed=1)
    assert s.yield_fraction == 0.0
    s = monte_carlo(lp, d.snapped.network, None, Targets(120.0, 40.0, m.gain_margin_db - 0.004),
                    r_tol=0.0, c_tol=0.0, draws=10, seed=1)
    assert s.yield_fraction == 1.0


def test_zero_tolerance_reproduces_nominal_margins_exactly_on_every_scenario():
    from scenario_plants import buck_plant

    from benchfit.loop.opamp import OpAmp
    from benchfit.loop.sensing import Sensing

    cases = []
    buck = LoopPlant(buck_plant(), band_hz=(10, 1e6))
    cases.append(([buck], "type3", Targets(20e3, 45, 6), OpAmp(gbw_hz=20e6)))
    cases.append(([buck], "type2", Targets(2e3, 50, 6), None))
    div = Sensing.divider(30e3, 10e3)
    corners = [LoopPlant(buck_plant(), div, band_hz=(10, 1e6), name="a")]
    cases.append((corners, "type3", Targets(15e3, 50, 8), None))
    servo = LoopPlant(servo_plant(), band_hz=(1, 100e3))
    cases.append(([servo], "pi", Targets(150.0, 50, 6), None))
    cases.append(([servo], "pi", Targets(None, 50, 6), None))
    cases.append(([LoopPlant(servo_plant(0.0), band_hz=(1, 100e3))], "pi", Targets(100.0, 50, 6),
                  None))
    for corners, kind, t, op in cases:
        d = design(corners, kind, t, opamp=op, draws=0)
        net = d.snapped.network
        for lp in corners:
            nominal = Loop(lp, net, op).margins()
            s = monte_carlo(lp, net, op, t, r_tol=0.0, c_tol=0.0, draws=5, seed=1)
            for key, ref in (("pm_deg", nominal.phase_margin_deg),
                             ("gm_db", nominal.gain_margin_db),
                             ("crossover_hz", nominal.crossover_hz)):
                got = s.percentiles[key]["p50"]
                assert got == pytest.approx(ref, rel=1e-9, abs=1e-9), (kind, t, key, got, ref)
            assert s.yield_fraction == (1.0 if d.targets_met else 0.0), (kind, t)


def test_zero_tolerance_on_load_corners_and_a_fitted_plant_is_the_worst_nominal():
    # three load corners of our buck (tests/test_design.py's scenario) and a plant fitted to a
    # noisy sweep of it (its covariance not drawn): the worst corner's nominal margins
    from scenario_plants import buck_plant

    from benchfit.data import FrequencyResponse
    from benchfit.fitting import fit
    from benchfit.fitting.model import PlantModel

    def buck(r_load):
        w0, c = 1 / math.sqrt(10e-6 * 100e-6), 100e-6
        q, wz = r_load * math.sqrt(c / 10e-6), 1 / (0.02 * c)
        return PlantModel(zeros=np.array([-wz]), poles=np.roots([1, w0 / q, w0 ** 2]),
                          k=12.0 * w0 ** 2 / wz)

    corners = [LoopPlant(buck(r), name=f"R{r}", band_hz=(10, 1e6)) for r in (0.5, 1.0, 10.0)]
    f = np.logspace(1, 6, 401)
    fitted = fit(FrequencyResponse(f, noisy(buck_plant().response(f), 0.05, 0.3, 2),
                                   quantity="plant"))
    cases = [(corners, Targets(15e3, 45, 6)),
             ([LoopPlant(fitted.model, band_hz=(10, 1e6), draws=fitted.draw_responses)],
              Targets(15e3, 45, 6))]
    for cs, t in cases:
        d = design(cs, "type3", t, draws=0)
        s = monte_carlo(cs, d.snapped.network, None, t, r_tol=0.0, c_tol=0.0, draws=5, seed=1,
                        plant_uncertainty=False)
        noms = [Loop(lp, d.snapped.network).margins() for lp in cs]
        assert s.percentiles["pm_deg"]["p50"] == pytest.approx(
            min(m.phase_margin_deg for m in noms), abs=1e-9)
        assert s.percentiles["gm_db"]["p50"] == pytest.approx(
            min(m.gain_margin_db for m in noms), abs=1e-9)
        assert s.yield_fraction == (1.0 if d.targets_met else 0.0)


def test_shipped_sample_plant_zero_tolerance_is_the_nominal():
    # the shipped measured buck sweep (sample_data/buck_plant.csv): its own frequencies
    from pathlib import Path

    from benchfit.data import read_sweep

    sweep = read_sweep(Path(__file__).parent.parent / "sample_data" / "buck_plant.csv")
    lp = LoopPlant(sweep)
    t = Targets(None, 45, 6)
    d = design(lp, "type3", t, draws=0)
    net = d.snapped.network
    nominal = Loop(lp, net).margins()
    assert nominal.closed_loop_stable
    s = monte_carlo(lp, net, None, t, r_tol=0.0, c_tol=0.0, draws=5, seed=1)
    assert s.yield_fraction == (1.0 if d.targets_met else 0.0)
    assert s.percentiles["pm_deg"]["p50"] == pytest.approx(nominal.phase_margin_deg, abs=1e-9)
    assert s.percentiles["gm_db"]["p50"] == pytest.approx(nominal.gain_margin_db, abs=1e-9)


def test_margins_command_reports_the_verdict_and_takes_a_stated_count(tmp_path, capsys):
    import json

    from benchfit.cli import main
    from benchfit.data import FrequencyResponse, write_sweep_csv

    model = double_integrator_loop()
    f = np.logspace(1, 5, 801)
    path = tmp_path / "loop.csv"
    write_sweep_csv(FrequencyResponse(f, noisy(model.response(f), 0.1, 0.5, 3), quantity="loop"),
                    path)
    assert main(["margins", str(path), "--json"]) == 0
    d = json.loads(capsys.readouterr().out)
    assert d["verdict"] == "stable" and d["integrators"] == 2
    assert "low-frequency asymptote" in d["integrators_evidence"]
    # a wrong count stated by the user is used, and the low end says it does not fit
    assert main(["margins", str(path), "--json", "--integrators", "1"]) == 0
    d = json.loads(capsys.readouterr().out)
    assert d["integrators"] == 1 and d["integrators_evidence"] == "1 integrator(s), given"
    assert any("asymptote" in w for w in d["warnings"])


def test_inverting_measured_plant_with_an_integrator_is_flagged_from_the_asymptote():
    # an integrating plant measured through an inverting path: phase +90 deg at the bottom,
    # which a 150 deg rule on the raw phase cannot tell from a plain integrator (common
    # practice, no source: the loop sign is the asymptote's phase with integrators removed)
    from benchfit.data import FrequencyResponse
    from benchfit.loop.prediction import sign_warnings

    f = np.logspace(1, 5, 400)
    s = 2j * np.pi * f
    h = 2 * np.pi * 1e3 / s / (1 + s / (2 * np.pi * 50e3))
    ok = LoopPlant(FrequencyResponse(f, noisy(h, 0.05, 0.3, 1), quantity="plant"))
    bad = LoopPlant(FrequencyResponse(f, noisy(-h, 0.05, 0.3, 1), quantity="plant"))
    assert sign_warnings([ok]) == []
    assert len(sign_warnings([bad])) == 1 and "inverting" in sign_warnings([bad])[0]


@pytest.mark.parametrize("given", [0, 1, 2, 3, 4, 7])
def test_a_stated_integrator_count_the_low_end_rules_out_is_flagged(given):
    # A type-1 loop (low-frequency slope fitted 1.00 +- 0.00). Reference: python-control
    # feedback poles on the true loop, stable. Tester finding 4: a count off by two (3)
    # gave UNSTABLE without a hint, since the phase asymptote agrees modulo 180 deg; the
    # slope must be weighed too.
    s = control.tf("s")
    w = 2 * np.pi
    t = (1 + s / (w * 1e3)) ** 2 / (s * (1 + s / (w * 100)) ** 2 * (1 + s / (w * 50e3)) ** 2)
    loop = t / abs(complex(t(1j * w * 5e3)))
    assert max(control.poles(control.feedback(loop, 1)).real) < 0
    f = np.logspace(0, 6, 601)
    T = np.array([complex(loop(1j * w * x)) for x in f])
    m = margins_from_data(f, T, integrators=given)
    flagged = [x for x in m.warnings if "low-frequency asymptote does not allow" in x]
    assert m.integrators == given and m.integrators_evidence == f"{given} integrator(s), given"
    assert len(flagged) == (given != 1)
    if given == 1:
        assert m.verdict == "stable"
    else:
        assert "slope n = 1.00" in flagged[0]

