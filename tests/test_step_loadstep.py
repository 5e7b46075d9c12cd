"""Load-step measurements and the output-impedance prediction."""

import numpy as np
import pytest
from scipy import signal

from benchfit.data import FrequencyResponse
from benchfit.errors import InputError
from benchfit.fitting.model import PlantModel
from benchfit.steps.compare import compare_load_step_with_zout
from benchfit.steps.fit import fit_load_step
from benchfit.steps.loadstep import (
    LoadStepMeasurement,
    impedance_step,
    measure_load_step,
    predict_load_step,
    step_from_frequency_response,
)
from benchfit.steps.models import resonant_load_step

ZETA, FN, RP = 0.25, 8e3, 0.04
WN = 2 * np.pi * FN


def _zcl():
    """Zcl = Rp·2ζωn·s/(s² + 2ζωn s + ωn²): a resonant closed-loop output impedance."""
    return PlantModel(zeros=[0.0], poles=np.roots([1, 2 * ZETA * WN, WN**2]), k=RP * 2 * ZETA * WN)


def _analytic_dip(t):
    """Unit-current step response of that Zcl: Rp·2ζωn/ωd·e^(−ζωn t)·sin(ωd t) (inverse Laplace,
    textbook table entry)."""
    wd = WN * np.sqrt(1 - ZETA**2)
    tt = np.clip(t, 0, None)
    return np.where(t > 0, RP * 2 * ZETA * WN / wd * np.exp(-ZETA * WN * tt) * np.sin(wd * tt), 0.0)


def test_impedance_step_of_a_model_matches_the_textbook_form():
    t = np.linspace(-1e-4, 1e-3, 3000)
    np.testing.assert_allclose(impedance_step(_zcl(), t), _analytic_dip(t), atol=1e-12)


def test_fourier_integral_matches_scipy_step():
    # Reference: scipy.signal.step of a damped impedance with an ESR-like direct term, sampled
    # densely over 1 Hz..100 MHz; the Fourier-integral step from the sampled response agrees.
    z, p, k = [-2e3, -5e5], np.roots([1, 2 * 0.5 * WN, WN**2]), 2e-2
    f = np.logspace(0, 8, 1500)
    fr = FrequencyResponse(f, PlantModel(z, p, k).response(f), quantity="impedance")
    t = np.linspace(0, 6e-4, 601)
    _, ref = signal.step(signal.ZerosPolesGain(z, p, k), T=t)
    ours = step_from_frequency_response(fr.freq_hz, fr.response, t)
    assert np.max(np.abs(ours[1:] - ref[1:])) < 0.01 * np.max(np.abs(ref))


def test_measure_load_step_against_analytic_figures():
    rng = np.random.default_rng(3)
    t = np.linspace(-1e-4, 1.2e-3, 5000)
    di = 1.0
    v = 3.3 - di * _analytic_dip(t) + 2e-4 * rng.standard_normal(t.size)
    m = measure_load_step((t, v), current_step_a=di)
    wd = WN * np.sqrt(1 - ZETA**2)
    t_pk = np.arctan(np.sqrt(1 - ZETA**2) / ZETA) / wd  # derivative of e^(−σt)·sin(ωd t) is zero
    assert m.deviation_v == pytest.approx(-di * _analytic_dip(np.array([t_pk]))[0], rel=0.03)
    assert m.peak_time_s == pytest.approx(t_pk, rel=0.08)
    assert m.ringing_freq_hz == pytest.approx(wd / (2 * np.pi), rel=0.03)
    assert m.zeta_from_decrement == pytest.approx(ZETA, rel=0.15)
    assert m.initial_v == pytest.approx(3.3, abs=1e-4)
    assert m.peak_impedance_ohm == pytest.approx(abs(m.deviation_v))
    assert np.isfinite(m.recovery_time_s)
    assert LoadStepMeasurement.from_dict(m.to_dict()).to_dict() == m.to_dict()


def test_compare_with_zout_model_and_data():
    rng = np.random.default_rng(4)
    t = np.linspace(-1e-4, 1.2e-3, 4000)
    v = predict_load_step(t, _zcl(), 0.5, 1.8, 0.0) + 1e-4 * rng.standard_normal(t.size)
    f = np.logspace(1, 7, 600)
    for zout in (_zcl(), FrequencyResponse(f, _zcl().response(f), quantity="impedance")):
        c = compare_load_step_with_zout((t, v), zout, 0.5)
        dev = c.row("deviation_v")
        assert dev["predicted"] == pytest.approx(dev["measured"], rel=0.05)
        ring = c.row("ringing_freq_hz")
        assert ring["predicted"] == pytest.approx(ring["measured"], rel=0.05)


def test_load_step_bad_traces():
    t = np.linspace(0, 1e-3, 2000)
    flat = 3.3 + 1e-4 * np.random.default_rng(0).standard_normal(t.size)
    with pytest.raises(InputError, match="no load transient"):
        measure_load_step((t, flat))
    late = 3.3 - _analytic_dip(t - 0.97e-3)
    with pytest.raises(InputError, match="too close to the end"):
        measure_load_step((t, late))


@pytest.mark.parametrize("zeta", [0.15, 0.5, 1.3])
def test_resonant_load_step_matches_scipy(zeta):
    # Reference: scipy.signal.step of Zcl = (Rdc·ωn² + Rp·2ζωn·s)/(s² + 2ζωn s + ωn²), scaled by −ΔI.
    rdc, rp, di = 0.005, 0.03, 2.0
    t = np.linspace(0, 1e-3, 2001)
    _, ref = signal.step(([rp * 2 * zeta * WN, rdc * WN**2], [1, 2 * zeta * WN, WN**2]), T=t)
    ours = resonant_load_step(t, zeta, FN, 1.0, -di * rdc, -di * rp, 0.0)
    np.testing.assert_allclose(ours, 1.0 - di * ref, atol=1e-12)


def test_fit_load_step_recovers_impedance():
    rng = np.random.default_rng(8)
    t = np.linspace(-1e-4, 1.5e-3, 4000)
    v = resonant_load_step(t, 0.3, FN, 5.0, -0.004, -0.03, 1.5e-6) + 3e-4 * rng.standard_normal(t.size)
    f = fit_load_step((t, v))
    for name, truth in (("zeta", 0.3), ("fn_hz", FN), ("droop_v", -0.004), ("resonant_v", -0.03),
                        ("t0_s", 1.5e-6)):
        assert abs(f.value(name) - truth) < 4 * f.stderr(name), name
    assert f.stats["rms_over_noise"] == pytest.approx(1.0, abs=0.15)
