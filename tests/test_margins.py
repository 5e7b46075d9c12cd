"""Stability margins against outside references.

References used (named again beside each check):
* python-control 0.10 ``stability_margins`` (general-purpose reference library),
  evaluated on the transfer function itself (its exact polynomial mode).
* Closed-loop poles as the roots of den(s) + num(s), computed with numpy: an
  independent check of the Nyquist verdict.
* Skogestad & Postlethwaite, Multivariable Feedback Control, 2nd ed. (2005),
  section 2.4.3: GM >= Ms/(Ms-1) and PM >= 2·asin(1/(2·Ms)).
* Second-order loop ωn²/(s(s+2ζωn)): PM = atan(2ζ / sqrt(sqrt(1+4ζ⁴) - 2ζ²)),
  standard textbook result (e.g. Ogata, Modern Control Engineering, from memory).
* Delayed integrator K·e^(-sτ)/s: the closed loop x' = -K·x(t-τ) is stable iff
  Kτ < π/2 (Hayes 1950), so the delay margin is (π/2 - Kτ)/K.
"""

import math

import control
import numpy as np
import pytest

from benchfit.errors import InputError
from benchfit.fitting.model import PlantModel
from benchfit.loop.margins import (
    Margins,
    margins_batch,
    margins_from_data,
    margins_from_model,
    margins_of_model,
)


def tf_model(num, den, delay_s=0.0):
    num = np.trim_zeros(np.asarray(num, float), "f")
    den = np.trim_zeros(np.asarray(den, float), "f")
    return PlantModel(np.roots(num), np.roots(den), num[0] / den[0], delay_s=delay_s)


def gains(m):
    return [c for c in m.crossings if c["kind"] == "gain"]


def phases(m):
    return [c for c in m.crossings if c["kind"] == "phase" and c["freq_hz"] > 0]


POLY_LOOPS = [
    ([5], [1, 3, 2, 0]),                          # one crossing each way, stable
    ([20], [1, 3, 2, 0]),                         # unstable
    ([100, 100], [1, 0.2, 100, 0]),               # lightly damped pair
    ([10], [1, 2, 1, 0.1]),
    ([4, 8, 400], [1, 1.2, 101, 2, 0]),
    ([1e4, 2e5, 1e6], [1, 30, 300, 1000, 0, 0]),  # double integrator, unstable
    # resonance pokes above 0 dB after the main crossover: 3 gain crossings, stable
    (list(np.polymul([50], np.polymul([1, 1], [1 / 20, 1]))),
     list(np.polymul(np.polymul([1, 0], [1 / 200, 1]), [1, 0.1, 100]))),
    ([10, 20, 10], [0.01, 1, 0, 0, 0]),           # conditionally stable (phase dips below -180)
]
MULTI = POLY_LOOPS[-2]


@pytest.mark.parametrize("num,den", POLY_LOOPS)
def test_every_crossing_agrees_with_python_control(num, den):
    # reference: python-control stability_margins(returnall=True) on the tf (exact mode)
    m = margins_of_model(tf_model(num, den))
    gm_ref, pm_ref, sm_ref, wpc_ref, wgc_ref, wms_ref = control.stability_margins(
        control.tf(num, den), returnall=True)
    ours_g = sorted((2 * np.pi * c["freq_hz"], c["value"]) for c in gains(m))
    ref_g = sorted(zip(np.asarray(wgc_ref, float), np.asarray(pm_ref, float), strict=True))
    assert len(ours_g) == len(ref_g)
    for (w, pm), (wr, pmr) in zip(ours_g, ref_g, strict=True):
        assert w == pytest.approx(wr, rel=1e-6)
        assert pm == pytest.approx(pmr, abs=1e-4)
    ref_p = sorted((w, 20 * np.log10(g)) for w, g in zip(wpc_ref, gm_ref, strict=True) if w > 0)
    ours_p = sorted((2 * np.pi * c["freq_hz"], c["value"]) for c in phases(m))
    assert len(ours_p) == len(ref_p)
    for (w, g), (wr, gr) in zip(ours_p, ref_p, strict=True):
        assert w == pytest.approx(wr, rel=1e-6)
        assert g == pytest.approx(gr, abs=1e-4)
    # modulus margin: control's minimum of |1+T| (finite here)
    assert m.modulus_margin == pytest.approx(float(np.min(sm_ref)), rel=1e-4)
    # Nyquist verdict vs the closed-loop poles (roots of den + num)
    char = np.polyadd(den, num)
    assert m.closed_loop_stable == bool(np.all(np.roots(char).real < 0))


def test_several_gain_crossings_are_all_listed_and_one_is_main():
    # loop with a resonance poking above 0 dB after the main crossover
    m = margins_of_model(tf_model(*MULTI))
    g = gains(m)
    assert len(g) == 3
    assert sum(c["main"] for c in g) == 1
    main = next(c for c in g if c["main"])
    # the main crossover ends the long low-frequency stretch where |T| > 1: the lowest one here
    assert main["freq_hz"] == min(c["freq_hz"] for c in g)
    assert m.crossover_hz == main["freq_hz"] and m.phase_margin_deg == main["value"]
    closest = min(g, key=lambda c: abs(c["value"]))
    assert m.min_phase_margin_deg == closest["value"] and not closest["main"]
    assert any("closer to -1 than the main crossover" in w for w in m.warnings)
    assert m.closed_loop_stable


def test_mid_band_dip_does_not_become_the_main_crossover():
    # integrator crossing 10 kHz, notch at 1 kHz dipping to about -20 dB: the loop gain
    # crosses 0 dB three times; the main crossover is the loop bandwidth (10 kHz, where an
    # integrator ωc/s alone would cross), not the edge of the dip.
    wz = 2 * np.pi * 1e3
    zeros = [wz * (-0.01 + 1j * math.sqrt(1 - 1e-4)), wz * (-0.01 - 1j * math.sqrt(1 - 1e-4))]
    model = PlantModel(zeros, [0.0, -wz, -wz], 2 * np.pi * 1e4)
    m = margins_of_model(model)
    assert len(gains(m)) == 3
    assert m.crossover_hz == pytest.approx(1e4, rel=0.03)   # notch pair: |T(10k)| = 99/101
    assert m.crossover_hz == max(c["freq_hz"] for c in gains(m))
    # the same rule on data and in the batch
    f = np.logspace(1, 6, 2001)
    assert margins_from_data(f, model.response(f)).crossover_hz == pytest.approx(m.crossover_hz, rel=1e-4)
    assert margins_batch(f, model.response(f))["crossover_hz"][0] == pytest.approx(m.crossover_hz, rel=1e-4)


def test_conditionally_stable_loop_reports_gain_reduction():
    # python-control gives GM = 0.051 (-25.8 dB) for this loop; we report it as the gain
    # reduction margin and keep gain_margin_db for the (absent) upward margin.
    m = margins_of_model(tf_model([10, 20, 10], [0.01, 1, 0, 0, 0]))
    gm_ref = control.stability_margins(control.tf([10, 20, 10], [0.01, 1, 0, 0, 0]))[0]
    assert m.gain_reduction_margin_db == pytest.approx(20 * math.log10(gm_ref), abs=1e-6)
    assert m.gain_margin_db == math.inf and m.closed_loop_stable
    assert any("conditionally stable" in w for w in m.warnings)


@pytest.mark.parametrize("zeta", [0.1, 0.3, 0.5, 0.707, 1.0, 2.0])
def test_second_order_loop_phase_margin_closed_form(zeta):
    # standard textbook result: PM = atan(2ζ/sqrt(sqrt(1+4ζ⁴) - 2ζ²)) for ωn²/(s(s+2ζωn))
    wn = 2 * np.pi * 1e3
    m = margins_of_model(PlantModel([], [0.0, -2 * zeta * wn], wn**2))
    expect = math.degrees(math.atan(2 * zeta / math.sqrt(math.sqrt(1 + 4 * zeta**4) - 2 * zeta**2)))
    assert m.phase_margin_deg == pytest.approx(expect, abs=1e-6)
    # crossover: ωc = ωn·sqrt(sqrt(1+4ζ⁴) - 2ζ²) (same source)
    wc = wn * math.sqrt(math.sqrt(1 + 4 * zeta**4) - 2 * zeta**2)
    assert 2 * np.pi * m.crossover_hz == pytest.approx(wc, rel=1e-8)
    assert m.gain_margin_db == math.inf and m.closed_loop_stable


@pytest.mark.parametrize("K,tau", [(1.0, 0.3), (2 * np.pi * 1e3, 50e-6), (10.0, 0.01)])
def test_delay_margin_of_delayed_integrator(K, tau):
    # Hayes (1950): x' = -K x(t - τ) is stable iff Kτ < π/2; with T = K e^(-sτ)/s the
    # crossover is ω = K, PM = π/2 - Kτ, and the delay margin is (π/2 - Kτ)/K.
    m = margins_of_model(PlantModel([], [0.0], K, delay_s=tau))
    assert 2 * np.pi * m.crossover_hz == pytest.approx(K, rel=1e-9)
    assert math.radians(m.phase_margin_deg) == pytest.approx(math.pi / 2 - K * tau, abs=1e-8)
    assert m.delay_margin_s == pytest.approx((math.pi / 2 - K * tau) / K, rel=1e-7)
    # phase crossings at ω τ = π/2 + 2πk (|T| = K/ω there): first GM = 20log10(π/(2Kτ))
    first = phases(m)[0]
    assert 2 * np.pi * first["freq_hz"] * tau == pytest.approx(math.pi / 2, rel=1e-8)
    assert first["value"] == pytest.approx(20 * math.log10(math.pi / (2 * K * tau)), abs=1e-6)
    # the Nyquist count with the exact delay: just below / above the margin
    for extra, stable in ((0.98, True), (1.02, False)):
        mm = margins_of_model(PlantModel([], [0.0], K, delay_s=tau + extra * m.delay_margin_s))
        assert mm.closed_loop_stable is stable


def test_delay_margin_of_a_rational_loop_matches_stability_boundary():
    # independent check: add the delay margin to the loop and the closed loop is marginal,
    # i.e. a gain crossing lands on -1 (PM = 0), per the definition of delay margin.
    model = tf_model([5], [1, 3, 2, 0])
    m = margins_of_model(model)
    m2 = margins_of_model(PlantModel(model.zeros, model.poles, model.k, delay_s=m.delay_margin_s))
    assert abs(m2.phase_margin_deg) < 1e-5


RNG = np.random.default_rng(20261202)


def random_loop(rng):
    """A random strictly proper polynomial loop, some with RHP poles and integrators."""
    npoles = rng.integers(1, 6)
    poles = []
    while len(poles) < npoles:
        w = 10 ** rng.uniform(-1, 2)
        if rng.random() < 0.4 and len(poles) + 2 <= npoles:
            zeta = rng.uniform(-0.3, 0.9)
            poles += [w * (-zeta + 1j * math.sqrt(1 - zeta**2)), w * (-zeta - 1j * math.sqrt(1 - zeta**2))]
        else:
            poles.append(w * rng.choice([-1, -1, 1]))
    if rng.random() < 0.3:
        poles.append(0.0)
    nz = rng.integers(0, len(poles))
    zeros = [10 ** rng.uniform(-1, 2) * rng.choice([-1, -1, -1, 1]) for _ in range(nz)]
    k = 10 ** rng.uniform(-1, 3) * rng.choice([1, 1, 1, -1])
    return PlantModel(zeros, poles, k)


@pytest.mark.parametrize("seed", range(60))
def test_nyquist_verdict_matches_closed_loop_poles(seed):
    # reference: closed-loop poles = roots of den(s) + num(s) (numpy), i.e. the count of
    # right-half-plane zeros of 1+T that the Nyquist criterion Z = P - N predicts.
    rng = np.random.default_rng(seed)
    model = random_loop(rng)
    b, a = model.to_tf()
    roots = np.roots(np.polyadd(a, b))
    scale = np.max(np.abs(roots)) + 1
    if np.any(np.abs(roots.real) < 1e-3 * scale):
        pytest.skip("closed loop too close to marginal for a verdict")
    m = margins_of_model(model)
    rhp = int(np.sum(roots.real > 0))
    assert m.open_loop_unstable_poles == int(np.sum(model.poles.real > 0))
    assert m.open_loop_unstable_poles - m.encirclements == rhp
    assert m.closed_loop_stable == (rhp == 0)


def test_open_loop_unstable_plant_stable_in_closed_loop():
    # T = 2(s+3)/((s-1)(s+5)): P = 1; closed loop s² + 6s + 1 has roots in the LHP (numpy check)
    model = tf_model([2, 6], [1, 4, -5])
    assert np.all(np.roots(np.polyadd([1, 4, -5], [2, 6])).real < 0)
    m = margins_of_model(model)
    assert m.open_loop_unstable_poles == 1 and m.closed_loop_stable and m.encirclements == 1
    assert any("Nyquist" in w for w in m.warnings)
    # T(0) = -6/5 sits on the negative real axis: lowering the gain by 20log10(6/5) dB
    # makes the loop unstable (1 + T(0) = 0)
    assert m.gain_reduction_margin_db == pytest.approx(-20 * math.log10(6 / 5), abs=1e-6)
    assert m.gain_margin_db == math.inf
    # the same from a dense sweep when the caller states P
    f = np.logspace(-3, 3, 1200)
    md = margins_from_data(f, model.response(f), unstable_open_loop_poles=1)
    assert md.closed_loop_stable and md.encirclements == 1
    md0 = margins_from_data(f, model.response(f), unstable_open_loop_poles=0)
    assert not md0.closed_loop_stable


def test_modulus_margin_bounds():
    # Skogestad & Postlethwaite (2005), sec. 2.4.3: GM >= Ms/(Ms-1), PM >= 2 asin(1/(2 Ms))
    checked = 0
    for seed in range(200):
        model = random_loop(np.random.default_rng(1000 + seed))
        m = margins_of_model(model)
        if not m.closed_loop_stable or m.open_loop_unstable_poles:
            continue
        ms = m.peak_sensitivity
        for c in phases(m):
            if c["value"] > 0:
                assert 10 ** (c["value"] / 20) >= ms / (ms - 1) * (1 - 1e-9)
        for c in gains(m):
            assert math.radians(abs(c["value"])) >= 2 * math.asin(1 / (2 * ms)) - 1e-9
        checked += 1
    assert checked > 30


def resonant_loop():
    # the MULTI loop scaled to kHz: main crossover near 0.6 kHz, a resonance at 10 kHz
    # (ζ = 0.005) that rises above 0 dB and adds two crossings
    scale = 1e3 * 2 * np.pi / (2 * np.pi)        # rad/s -> rad/ms: frequencies x1000
    m = tf_model(*MULTI)
    n_extra = len(m.poles) - len(m.zeros)
    return PlantModel(m.zeros * scale, m.poles * scale, m.k * scale**n_extra)


def test_data_path_matches_model_on_a_fine_grid_and_warns_on_a_coarse_one():
    model = resonant_loop()
    ref = margins_of_model(model)
    assert len(gains(ref)) >= 3      # the resonance adds crossings
    f = np.logspace(0, 6, 6 * 2000 + 1)
    fine = margins_from_data(f, model.response(f))
    assert fine.phase_margin_deg == pytest.approx(ref.phase_margin_deg, abs=0.01)
    assert fine.crossover_hz == pytest.approx(ref.crossover_hz, rel=1e-4)
    assert fine.min_phase_margin_deg == pytest.approx(ref.min_phase_margin_deg, abs=0.05)
    assert fine.closed_loop_stable == ref.closed_loop_stable
    assert not [w for w in fine.warnings if "coarse" in w or "under-sampled" in w]
    f10 = np.logspace(0, 6, 6 * 10 + 1)                   # 10 points per decade
    coarse = margins_from_data(f10, model.response(f10))
    assert any("coarse" in w or "under-sampled" in w for w in coarse.warnings)


def test_unstable_resonant_loop_from_a_coarse_sweep_is_not_passed_as_safe():
    # integrator crossing ~3 kHz with a lightly damped pair at 10 kHz whose peak crosses
    # 0 dB with the phase past -180°: closed-loop poles in the RHP (numpy roots of den+num).
    # python-control on 10 points/decade data reads such loops as comfortably stable
    # (measured, issue 4); benchfit must say unstable, or at least that the sweep is too coarse.
    wn, z = 2 * np.pi * 1e4, 0.05
    model = PlantModel([], [0.0, wn * (-z + 1j * math.sqrt(1 - z * z)), wn * (-z - 1j * math.sqrt(1 - z * z))],
                       2 * np.pi * 3e3 * wn**2)
    b, a = model.to_tf()
    assert np.any(np.roots(np.polyadd(a, b)).real > 0)
    assert not margins_of_model(model).closed_loop_stable
    for ppd in (10, 20):
        f = np.logspace(1, 6, 5 * ppd + 1)
        m = margins_from_data(f, model.response(f))
        assert (not m.closed_loop_stable) or any("coarse" in w or "under-sampled" in w
                                                 for w in m.warnings)


def test_undamped_poles_are_flagged():
    w0 = 2 * np.pi * 100
    m = margins_of_model(PlantModel([-w0 / 10], [0.0, 1j * w0, -1j * w0], 1e5))
    assert any("imaginary axis" in w for w in m.warnings)


def test_sweep_that_stops_before_crossover_says_so():
    model = PlantModel([], [0.0, -2 * np.pi * 1e5], 2 * np.pi * 1e4 * 2 * np.pi * 1e5)
    f = np.logspace(1, 3.5, 60)
    m = margins_from_data(f, model.response(f))
    assert math.isnan(m.phase_margin_deg) and math.isnan(m.crossover_hz)
    assert any("crossover lies above" in w for w in m.warnings)


def test_modulus_margin_at_the_top_of_the_band_is_reported_not_infinite():
    # T = -0.5/(s+1)·... : |1+T| approaches its limit at high frequency; python-control returns
    # inf for such loops (measured, issue 4); we report the smallest value seen in the band.
    model = PlantModel([], [-1.0], 0.5)
    m = margins_of_model(model)
    assert math.isfinite(m.modulus_margin) and m.modulus_margin == pytest.approx(1.0, abs=1e-3)


def test_batch_equals_single_data_path_row_by_row():
    rng = np.random.default_rng(5)
    model = resonant_loop()
    f = np.logspace(0, 6, 400)
    T = model.response(f)[None, :] * (1 + 0.3 * rng.standard_normal((200, 1))) \
        * np.exp(1j * 0.3 * rng.standard_normal((200, 1)))
    b = margins_batch(f, T)
    for i in range(0, 200, 7):
        m = margins_from_data(f, T[i])
        assert b["pm_deg"][i] == pytest.approx(m.phase_margin_deg, abs=1e-9, nan_ok=True)
        assert b["crossover_hz"][i] == pytest.approx(m.crossover_hz, rel=1e-12, nan_ok=True)
        assert b["min_pm_deg"][i] == pytest.approx(m.min_phase_margin_deg, abs=1e-9)
        assert b["modulus_margin"][i] == pytest.approx(m.modulus_margin, rel=1e-12)
        assert bool(b["stable"][i]) == m.closed_loop_stable
        gm_pos = min([c["value"] for c in phases(m) if c["value"] > 0], default=math.inf)
        assert b["gm_db"][i] == pytest.approx(gm_pos, abs=1e-9)
        if m.closed_loop_stable:
            assert b["delay_margin_s"][i] == pytest.approx(m.delay_margin_s, rel=1e-9)


def test_from_model_callable_with_exact_delay_and_json_round_trip(tmp_path):
    model = tf_model([5], [1, 3, 2, 0])
    m = margins_from_model(model.response, 1e-3, 10.0, delay_s=0.05)
    ref = margins_of_model(PlantModel(model.zeros, model.poles, model.k, delay_s=0.05))
    assert m.phase_margin_deg == pytest.approx(ref.phase_margin_deg, abs=1e-8)
    path = tmp_path / "m.json"
    m.to_json(path)
    back = Margins.from_json(path)
    assert back.to_dict() == m.to_dict()
    for key in ("phase_margin_deg", "crossover_hz", "gain_margin_db", "phase_crossover_hz",
                "delay_margin_s", "modulus_margin", "crossings"):
        assert key in m.to_dict()


def test_bad_inputs_raise_input_error():
    with pytest.raises(InputError):
        margins_from_data([1, 2], [1, 2])
    with pytest.raises(InputError):
        margins_from_data([1, 2, 2], [1, 2, 3])
    with pytest.raises(InputError):
        margins_from_model(lambda f: 1 / f, 10, 1)
    with pytest.raises(InputError):
        margins_from_data([1, 2, 3], [1, 2, 3], unstable_open_loop_poles=-1)


def test_text_report_summarises_far_phase_crossings_of_a_delay():
    # K e^(-sτ)/s: phase crossings at ωτ = π/2 + 2πk with |T| = K/ω, GM growing without
    # end. Measured to 10 MHz, those above 60 dB go on one summary line of the text; the
    # JSON lists them all.
    K, tau = 2 * np.pi * 1e3, 1e-6
    f = np.logspace(1, 7, 601)
    m = margins_from_data(f, K * np.exp(-2j * np.pi * f * tau) / (2j * np.pi * f))
    far = [c for c in phases(m) if c["value"] > 60]
    assert len(far) >= 8
    text = m.report()
    assert f"and {len(far)} phase crossing(s)" in text
    assert text.count("  phase ") == len(phases(m)) - len(far)
    assert len(m.to_dict()["crossings"]) == len(m.crossings)
    # from the model, crossings deeper than -60 dB are not resolved, so not listed
    mm = margins_of_model(PlantModel([], [0.0], K, delay_s=tau), f_max_hz=1e10)
    assert all(c["value"] < 61 for c in phases(mm))
    # the first one: GM = 20log10(π/(2Kτ)) (see the delayed-integrator test above)
    assert phases(mm)[0]["value"] == pytest.approx(20 * math.log10(math.pi / (2 * K * tau)), abs=1e-6)


@pytest.mark.parametrize("seed", range(25))
def test_delay_margin_is_the_stability_boundary_of_random_loops(seed):
    # definition (e.g. Åström & Murray, Feedback Systems, sec. 10.3): the smallest added
    # delay that makes a stable loop unstable. Checked with the exact-delay Nyquist count:
    # stable just below it, unstable just above it.
    rng = np.random.default_rng(500 + seed)
    base = random_loop(rng)
    # open-loop stable version (mirror RHP poles), unity gain at a random frequency
    base = PlantModel(base.zeros, -np.abs(base.poles.real) + 1j * base.poles.imag, 1.0)
    wc = 10 ** rng.uniform(-1, 2)
    base = PlantModel(base.zeros, base.poles, 1.0 / abs(base.at_s(np.array([1j * wc]))[0]))
    # lower the gain step by step until the closed loop is stable (numpy roots of den+num)
    for scale in 10.0 ** -np.arange(0, 8, 0.25):
        model = PlantModel(base.zeros, base.poles, base.k * scale)
        b, a = model.to_tf()
        roots = np.roots(np.polyadd(a, b))
        if np.all(roots.real < -1e-3 * (np.max(np.abs(roots)) + 1)):
            break
    else:
        pytest.skip("no stable gain found")
    m = margins_of_model(model)
    assert m.closed_loop_stable
    if not math.isfinite(m.delay_margin_s):
        pytest.skip("no gain crossing: any delay is tolerated")
    for factor, stable in ((0.97, True), (1.03, False)):
        d = PlantModel(model.zeros, model.poles, model.k, delay_s=factor * m.delay_margin_s)
        assert margins_of_model(d).closed_loop_stable is stable


@pytest.mark.parametrize("seed", range(10))
def test_margins_are_invariant_to_frequency_scaling(seed):
    # T(s) and T(s/a) have the same phase and gain margins, with every crossing
    # frequency scaled by a (time scaling of a linear system, any control text).
    rng = np.random.default_rng(900 + seed)
    model = random_loop(rng)
    a = 10 ** rng.uniform(-3, 4)
    n_excess = len(model.poles) - len(model.zeros)
    scaled = PlantModel(model.zeros * a, model.poles * a, model.k * a**n_excess)
    m1, m2 = margins_of_model(model), margins_of_model(scaled)
    g1, g2 = gains(m1), gains(m2)
    assert len(g1) == len(g2)
    for c1, c2 in zip(g1, g2, strict=True):
        assert c2["freq_hz"] == pytest.approx(a * c1["freq_hz"], rel=1e-7)
        assert c2["value"] == pytest.approx(c1["value"], abs=1e-6)
    assert m2.closed_loop_stable == m1.closed_loop_stable
    assert m2.modulus_margin == pytest.approx(m1.modulus_margin, rel=1e-6)


def test_coarse_phase_crossings_of_a_long_delay_warn_on_one_line():
    # a 200 µs delay past a 1 kHz crossover crosses -180° every 5 kHz; on a 20-point-a-decade
    # sweep each of them is coarse: one warning names the one nearest 0 dB and counts the rest
    f = np.logspace(1, 6, 101)
    s = 2j * np.pi * f
    T = (2 * np.pi * 1e3 / s) * np.exp(-s * 200e-6)
    m = margins_from_data(f, T)
    coarse = [w for w in m.warnings if w.startswith("phase crossing at") and "coarse" in w]
    assert len(coarse) == 1 and "more phase crossing(s)" in coarse[0]


@pytest.mark.parametrize("im", [1.372e-17, 5e-17, -1e-17, 0.0, -0.0])
def test_a_grid_point_exactly_on_the_phase_crossover_keeps_the_gain_margin(im):
    # An op-amp buffer loop, 1e5/((1+s/ω10)(1+s/ω500k)(1+s/ω5M)); reference: python-control
    # stability_margins on the transfer function itself.  A grid point placed at the phase
    # crossover (as the capture planner's dense grid does) has Im T at rounding level, so
    # its phase reads +180° or -180°: the crossing was lost and the gain margin read as
    # infinite (seen on a simulated capture: GM 'not determined' with the crossing
    # bracketed by measured points).
    w = [2 * np.pi * x for x in (10.0, 500e3, 5e6)]
    s = control.tf("s")
    loop = 1e5 / ((1 + s / w[0]) * (1 + s / w[1]) * (1 + s / w[2]))
    gm_ref, _, _, wpc, _, _ = control.stability_margins(loop)
    fpc = wpc / (2 * np.pi)
    f = np.unique(np.concatenate([np.logspace(3, 7.5, 300), [fpc]]))
    T = np.array([complex(loop(2j * np.pi * x)) for x in f])
    i = int(np.argmin(np.abs(f - fpc)))
    T[i] = complex(-abs(T[i]), im)  # |T| is 0.18 there; 1.372e-17 is the value seen
    b = margins_batch(f, T)
    assert b["gm_db"][0] == pytest.approx(20 * np.log10(gm_ref), abs=0.01)
    assert b["phase_crossover_hz"][0] == pytest.approx(fpc, rel=1e-6)
    assert len(b["phases_gm_db"][0]) == 1  # counted once
    assert margins_from_data(f, T).gain_margin_db == pytest.approx(20 * np.log10(gm_ref), abs=0.01)
