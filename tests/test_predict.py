"""Closed-loop predictions against outside references.

References (named again beside each check):
* scipy.signal.step / python-control step_info (general-purpose reference libraries)
  on the rational closed loop built independently with numpy polynomials.
* Delayed loops: the exact series solution.  For T = K e^(-sτ) G(s),
  T/(1+T) = Σ_n (-1)^n T^(n+1), each term a delayed rational response (the
  "method of steps"; Bellman & Cooke, Differential-Difference Equations, 1963).
  Inverse transforms from the standard Laplace table:
  L⁻¹{1/s^(m+1)} = t^m/m!,  L⁻¹{1/(s (s+a)^m)} = (1 - e^(-at) Σ_{j<m} (at)^j/j!)/a^m.
* Closed-loop bandwidth and resonant peak of ωn²/(s(s+2ζωn)) in unity feedback:
  ωB = ωn·sqrt(1 - 2ζ² + sqrt(4ζ⁴ - 4ζ² + 2)), Mr = 1/(2ζ sqrt(1-ζ²)) (standard
  textbook results, e.g. Ogata, Modern Control Engineering; from memory).
* Output impedance: a regulator circuit solved by nodal analysis with numpy.linalg.
"""

import math

import control
import numpy as np
import pytest
from scipy import signal
from test_margins import tf_model

from benchfit.data.response import FrequencyResponse
from benchfit.errors import InputError
from benchfit.fitting.model import PlantModel
from benchfit.loop.loopsim import state_space
from benchfit.loop.predict import (
    Prediction,
    closed_loop,
    load_step,
    output_impedance,
    predict,
    reference_step,
    step_metrics,
)

RATIONAL = [
    ([5], [1, 3, 2, 0]),
    ([10, 20, 10], [0.01, 1, 0, 0, 0]),       # conditionally stable, double integrator
    ([2, 6], [1, 4, -5]),                     # open-loop unstable plant
    ([1, 1], [1, 0.5, 0]),
    ([3, 1], [1, 1]),                         # biproper: jump at t = 0
    ([1e8], [1, 1.2e4, 3.5e7, 0]),            # poles over decades (kHz scale)
]


@pytest.mark.parametrize("num,den", RATIONAL)
def test_reference_step_matches_scipy_on_rational_loops(num, den):
    # reference: scipy.signal.step of the closed loop num/(den+num) built with numpy
    beta = 0.25
    r = reference_step(tf_model(num, den), sensing_gain=beta, step=1.2)
    cl = signal.TransferFunction(num, np.polyadd(den, num))
    _, y = signal.step(cl, T=r.time_s)
    np.testing.assert_allclose(r.value, 1.2 / beta * y, atol=1e-9 * 1.2 / beta)
    assert r.final_value == pytest.approx(1.2 / beta * num[-1] / np.polyadd(den, num)[-1], rel=1e-12)


@pytest.mark.parametrize("num,den", RATIONAL)
def test_step_metrics_match_python_control(num, den):
    # reference: control.step_info on the same samples (its rise time is sample-based,
    # so agreement is to one sample interval), and on its own simulation of the system.
    r = reference_step(tf_model(num, den))
    info = control.step_info(r.value, T=r.time_s, yfinal=r.final_value)
    dt = r.time_s[1] - r.time_s[0]
    # ours refines the sampled peak with a parabola: never below the sampled value
    assert r.overshoot_pct >= info["Overshoot"] - 1e-9
    assert r.overshoot_pct == pytest.approx(info["Overshoot"], abs=0.05)
    assert r.rise_time_s == pytest.approx(info["RiseTime"], abs=1.01 * dt)
    assert r.settling_time_s == pytest.approx(info["SettlingTime"], abs=1.01 * dt)
    sys = control.feedback(control.tf(num, den), 1)
    own = control.step_info(sys, T=np.linspace(0, r.time_s[-1], 200001))
    assert r.overshoot_pct == pytest.approx(own["Overshoot"], abs=1e-3)
    assert r.settling_time_s == pytest.approx(own["SettlingTime"], rel=1e-3, abs=2 * dt)


def series_delayed_integrator(t, K, tau):
    # Σ_n (-1)^n K^(n+1) (t-(n+1)τ)^(n+1)/(n+1)!  (method of steps, Laplace table)
    y = np.zeros_like(t)
    for n in range(int(t[-1] / tau) + 1):
        a = np.clip(t - (n + 1) * tau, 0, None)
        y += (-1) ** n * K ** (n + 1) * a ** (n + 1) / math.factorial(n + 1)
    return y


def series_delayed_lag(t, K, a, tau):
    # T = K e^(-sτ)/(s+a): Σ_n (-1)^n K^(n+1) e^(-(n+1)sτ) / (s (s+a)^(n+1))
    y = np.zeros_like(t)
    for n in range(int(t[-1] / tau) + 1):
        m = n + 1
        u = np.clip(t - m * tau, 0, None)
        poly = sum((a * u) ** j / math.factorial(j) for j in range(m))
        y += (-1) ** n * K**m * (1 - np.exp(-a * u) * poly) / a**m
    return y


@pytest.mark.parametrize("K,tau", [(1.0, 0.3), (2 * np.pi * 1e3, 100e-6), (0.5, 2.0)])
def test_delayed_integrator_step_is_exact(K, tau):
    r = reference_step(PlantModel([], [0.0], K, delay_s=tau))
    exact = series_delayed_integrator(r.time_s, K, tau)
    assert np.max(np.abs(r.value - exact)) < 1e-4
    # a pure delay means nothing at all happens before τ (a Padé stand-in would move early)
    assert np.all(r.value[r.time_s < tau * (1 - 1e-9)] == 0.0)
    assert r.delay_s == tau


def test_delayed_first_order_lag_step_is_exact():
    K, a, tau = 3.0, 2.0, 0.25
    r = reference_step(PlantModel([], [-a], K, delay_s=tau))
    exact = series_delayed_lag(r.time_s, K, a, tau)
    early = r.time_s < 12 * tau        # the alternating series loses digits to cancellation later
    assert np.max(np.abs(r.value - exact)[early]) < 1e-5
    assert r.final_value == pytest.approx(K / (a + K))


def test_biproper_delayed_loop_keeps_its_jumps():
    # T = k (s+z)/(s+p) e^(-sτ): direct feed-through echoes the step every τ.
    # reference: the series Σ (-1)^n k^(n+1) [((s+z)/(s+p))^(n+1)/s] e^(-(n+1)sτ),
    # each term a delayed scipy.signal.step of a rational function.
    k, z, p, tau = 0.5, 1.0, 4.0, 0.4
    r = reference_step(PlantModel([-z], [-p], k, delay_s=tau), t_end_s=6.0)
    t = r.time_s
    ref = np.zeros_like(t)
    for n in range(int(t[-1] / tau) + 1):
        m = n + 1
        num = np.poly1d([1.0, z]) ** m
        den = np.poly1d([1.0, p]) ** m
        u = t - m * tau
        on = u >= -1e-12
        if not on.any():
            break
        _, y = signal.step(signal.TransferFunction(num.coeffs, den.coeffs), T=np.clip(u[on], 0, None))
        ref[on] += (-1) ** n * k**m * y
    # compare away from the jump instants (there the sample sits on the edge)
    away = np.abs(t / tau - np.rint(t / tau)) > 1e-3
    assert np.max(np.abs(r.value[away] - ref[away])) < 1e-4
    # first jump at τ is k·1 = 0.5 (T(∞) = k), then the echo at 2τ subtracts k²
    i1 = np.searchsorted(t, 1.5 * tau)
    assert r.value[i1] == pytest.approx(ref[i1], abs=1e-4)


def test_closed_loop_bandwidth_of_integrator_and_second_order():
    # T = ωc/s -> 1/(1+s/ωc): -3 dB exactly at ωc (first-order low-pass)
    wc = 2 * np.pi * 2e3
    cl = closed_loop(PlantModel([], [0.0], wc), sensing_gain=0.5)
    assert cl.bandwidth_hz == pytest.approx(2e3, rel=1e-9)
    assert cl.low_freq_gain == pytest.approx(2.0, rel=1e-9)
    assert cl.peaking_db == pytest.approx(0.0, abs=1e-9)
    # second order (textbook ωB and Mr, see module docstring)
    wn, zeta = 2 * np.pi * 1e3, 0.3
    cl2 = closed_loop(PlantModel([], [0.0, -2 * zeta * wn], wn**2))
    wb = wn * math.sqrt(1 - 2 * zeta**2 + math.sqrt(4 * zeta**4 - 4 * zeta**2 + 2))
    assert 2 * np.pi * cl2.bandwidth_hz == pytest.approx(wb, rel=1e-9)
    mr = 1 / (2 * zeta * math.sqrt(1 - zeta**2))
    assert cl2.peaking_db == pytest.approx(20 * math.log10(mr), abs=0.01)   # grid-limited peak


def test_closed_loop_from_a_sweep_matches_the_model():
    model = tf_model([5], [1, 3, 2, 0])
    f = np.logspace(-3, 2, 2001)
    from_data = closed_loop(FrequencyResponse(f, model.response(f), quantity="loop"))
    from_model = closed_loop(model, f)
    np.testing.assert_allclose(from_data.response, from_model.response, rtol=1e-12)
    assert from_data.bandwidth_hz == pytest.approx(from_model.bandwidth_hz, rel=1e-4)


# ----- a regulator circuit for output impedance --------------------------------------------
# pass device: transconductance gm into the output node; output capacitor C with ESR;
# load RL; divider Rt/Rb; ideal op-amp integrator Rin/Cf (inverting, reference = AC ground).
GM, RL, C, RESR, RT, RB, RIN, CF = 2.0, 5.0, 100e-6, 0.02, 30e3, 10e3, 10e3, 22e-9


def nodal_zout(freq_hz):
    """Closed-loop output impedance by nodal analysis (unknowns vo, vfb, vc; vn = 0)."""
    out = []
    for f in freq_hz:
        s = 2j * np.pi * f
        yc = 1 / (RESR + 1 / (s * C))
        A = np.array([
            [1 / RL + yc + 1 / RT, -1 / RT, -GM],           # KCL at the output node
            [-1 / RT, 1 / RT + 1 / RB + 1 / RIN, 0],         # KCL at the feedback node
            [0, -1 / RIN, -s * CF],                          # KCL at the inverting input
        ], dtype=complex)
        vo = np.linalg.solve(A, np.array([1.0, 0, 0], dtype=complex))[0]
        out.append(vo)
    return np.array(out)


def circuit_models():
    rbin = RB * RIN / (RB + RIN)
    g = 1 / RL + 1 / (RT + rbin)
    kdiv = rbin / (RT + rbin)
    zol = PlantModel([-1 / (C * RESR)], [-g / (C * (1 + g * RESR))], RESR / (1 + g * RESR))
    loop = PlantModel(zol.zeros, np.concatenate([[0.0], zol.poles]), GM * kdiv / (CF * RIN) * zol.k)
    return zol, loop


def test_output_impedance_matches_nodal_analysis():
    zol, loop = circuit_models()
    f = np.logspace(0, 6, 301)
    z = output_impedance(zol, loop, f)
    np.testing.assert_allclose(z.closed_loop, nodal_zout(f), rtol=1e-9)
    assert z.peak_ohm == pytest.approx(np.max(np.abs(nodal_zout(f))), rel=1e-9)
    # from sweeps on different grids: interpolated on the impedance grid
    fz = np.logspace(0, 6, 3001)
    ft = np.logspace(-1, 7, 4001)
    zs = output_impedance(FrequencyResponse(fz, zol.response(fz), quantity="impedance"),
                          FrequencyResponse(ft, loop.response(ft), quantity="loop"))
    np.testing.assert_allclose(np.abs(zs.closed_loop), np.abs(nodal_zout(fz)), rtol=2e-3)


def test_load_step_matches_scipy_on_the_circuit():
    # reference: scipy.signal.step of Z_cl = N_z D_t / (D_z (D_t + N_t)) (numpy polynomials)
    zol, loop = circuit_models()
    di = 0.5
    r = load_step(zol, loop, current_step_a=di)
    bz, az = zol.to_tf()
    bt, at = loop.to_tf()
    num = np.polymul(bz, at)
    den = np.polymul(az, np.polyadd(at, bt))
    _, y = signal.step(signal.TransferFunction(num, den), T=r.time_s)
    np.testing.assert_allclose(r.value, -di * y, atol=1e-9 * np.max(np.abs(y)) * di + 1e-15)
    assert r.final_value == pytest.approx(0.0, abs=1e-15)       # the integrator restores the output
    assert r.peak_value < 0 and r.peak_value == pytest.approx(-di * np.max(y), rel=1e-9)
    assert r.settling_time_s > r.peak_time_s


def test_load_step_through_a_delayed_loop_is_exact():
    # Z_ol = R, T = K e^(-sτ)/s: v = -ΔI R Σ_n (-1)^n K^n (t-nτ)^n/n!  (series, Laplace table)
    R, K, tau, di = 0.1, 2 * np.pi * 500, 200e-6, 2.0
    r = load_step(PlantModel([], [], R), PlantModel([], [0.0], K, delay_s=tau), current_step_a=di)
    t = r.time_s
    exact = np.zeros_like(t)
    for n in range(int(t[-1] / tau) + 1):
        u = np.clip(t - n * tau, 0, None)
        exact += np.where(t >= n * tau, (-1) ** n * K**n * u**n / math.factorial(n), 0.0)
    exact *= -di * R
    assert np.max(np.abs(r.value - exact)) < 1e-4 * di * R
    assert r.peak_value == pytest.approx(-di * R, rel=1e-6)


def test_step_metrics_by_hand():
    # hand-made record: 0 → 1 with a 10 % overshoot, crossings at known times
    t = np.array([0.0, 1.0, 2.0, 3.0, 4.0, 5.0, 6.0])
    y = np.array([0.0, 0.5, 1.0, 1.1, 1.01, 1.0, 1.0])
    m = step_metrics(t, y, 1.0)
    # peak refined by the parabola through (2, 1.0), (3, 1.1), (4, 1.01):
    # vertex = y1 - (y0 - y2)² / (8 (y0 - 2 y1 + y2)) = 1.1 + 1e-4/1.52
    assert m["overshoot_pct"] == pytest.approx((0.1 + 1e-4 / 1.52) * 100)
    assert m["rise_time_s"] == pytest.approx(1.8 - 0.2)          # 0.9 at t=1.8, 0.1 at t=0.2
    assert m["settling_time_s"] == pytest.approx(3.0 + (0.1 - 0.02) / (0.1 - 0.01))
    with pytest.raises(InputError):
        step_metrics(t, y, 0.0)


def test_state_space_cascade_reproduces_the_model():
    # frequency response of the cascade (C (sI-A)^-1 B + D) equals the zpk model
    model = PlantModel([-1e3, -2e5 + 1e5j, -2e5 - 1e5j],
                       [0.0, -50.0, -3e4 + 2e5j, -3e4 - 2e5j, -1e7, -5e7], 7e9)
    A, B, C, D = state_space(model)
    for w in (1.0, 1e3, 2e5, 1e7):
        h = (C @ np.linalg.solve(1j * w * np.eye(A.shape[0]) - A, B))[0, 0] + D
        assert h == pytest.approx(model.at_s(np.array([1j * w]))[0], rel=1e-9)
    with pytest.raises(InputError):
        state_space(PlantModel([-1.0, -2.0], [-3.0], 1.0))


def test_predict_gathers_everything_and_round_trips(tmp_path):
    zol, loop = circuit_models()
    p = predict(loop, sensing_gain=0.25, z_open=zol, load_step_a=1.0)
    assert p.step is not None and p.impedance is not None and p.load is not None
    assert p.margins.closed_loop_stable
    back = Prediction.from_dict(p.to_dict())
    assert back.to_dict()["margins"] == p.to_dict()["margins"]
    assert back.load.peak_value == p.load.peak_value
    assert "load step" in p.report()
    f = np.logspace(0, 6, 400)
    pd = predict(FrequencyResponse(f, loop.response(f), quantity="loop"), load_step_a=1.0)
    assert pd.step is None and any("measured data" in w for w in pd.warnings)


def test_unstable_loop_warns():
    r = reference_step(tf_model([20], [1, 3, 2, 0]))
    assert any("unstable" in w for w in r.warnings)
