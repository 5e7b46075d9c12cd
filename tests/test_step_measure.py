"""Model-free step measurements against textbook formulas and python-control's step_info."""

import control
import numpy as np
import pytest

from benchfit.data import TimeTrace
from benchfit.errors import InputError
from benchfit.steps.measure import StepMeasurement, measure_step
from benchfit.steps.models import second_order_step

FN = 1e3
WN = 2 * np.pi * FN


def _clean(zeta, n=6001, pre=300):
    """Clean second-order step from python-control, with a flat part before t = 0."""
    t_end = (20.0 / (zeta * WN)) if zeta < 1 else 30.0 * zeta**2 / WN
    t = np.linspace(0.0, t_end, n)
    sys = control.tf([WN**2], [1.0, 2 * zeta * WN, WN**2])
    y = control.step_response(sys, T=t).outputs
    dt = t[1]
    tt = np.concatenate([-dt * np.arange(pre, 0, -1), t])
    yy = np.concatenate([np.zeros(pre), y])
    return sys, t, tt, yy


@pytest.mark.parametrize("zeta", [0.1, 0.3, 0.5, 0.7, 0.9])
def test_overshoot_matches_textbook_formula(zeta):
    # %OS = 100·exp(−πζ/√(1−ζ²)) (standard textbook formula for the second-order step).
    _, _, tt, yy = _clean(zeta)
    m = measure_step((tt, yy))
    # the peak is read at a sample: the sampling limits agreement to ~0.01 % of the step
    assert m.overshoot_pct == pytest.approx(100 * np.exp(-np.pi * zeta / np.sqrt(1 - zeta**2)), abs=0.01)


@pytest.mark.parametrize("zeta", [0.1, 0.3, 0.6, 1.0, 1.8])
def test_agrees_with_control_step_info(zeta):
    # Reference: python-control step_info (rise 10-90 %, settling band 2 %, times from T[0] = 0,
    # values read at samples without interpolation); ours interpolates, so times agree within
    # one sample interval.
    sys, t, tt, yy = _clean(zeta)
    info = control.step_info(sys, T=t)
    m = measure_step((tt, yy), step_time_s=0.0)
    dt = t[1]
    assert m.rise_time_s == pytest.approx(info["RiseTime"], abs=1.01 * dt)
    assert m.settling_time_s == pytest.approx(info["SettlingTime"], abs=1.01 * dt)
    assert m.overshoot_pct == pytest.approx(info["Overshoot"], abs=0.01)
    if info["Overshoot"] > 0.1:  # without overshoot the peak is wherever the record ends
        assert m.peak_time_s == pytest.approx(info["PeakTime"], abs=1.01 * dt)
    assert m.undershoot_pct == 0.0 == info["Undershoot"]
    assert m.band == 0.02


def test_non_minimum_phase_undershoot_matches_step_info():
    # A right-half-plane zero dips first; python-control step_info reports the dip as Undershoot.
    t = np.linspace(0, 8e-3, 8001)
    sys = control.tf([-1 / WN, 1.0], [1 / WN**2, 1.4 / WN, 1.0])
    info = control.step_info(sys, T=t)
    y = control.step_response(sys, T=t).outputs
    tt = np.concatenate([-t[1] * np.arange(100, 0, -1), t])
    m = measure_step((tt, np.concatenate([np.zeros(100), y])), step_time_s=0.0)
    assert info["Undershoot"] > 5
    assert m.undershoot_pct == pytest.approx(info["Undershoot"], abs=0.01)


def test_ringing_and_decrement_of_a_clean_trace():
    # Damped frequency fd = fn·√(1−ζ²) and log decrement δ = 2πζ/√(1−ζ²) (textbook second order).
    zeta = 0.15
    _, _, tt, yy = _clean(zeta)
    m = measure_step((tt, yy))
    assert m.ringing_freq_hz == pytest.approx(FN * np.sqrt(1 - zeta**2), rel=1e-4)
    assert m.log_decrement == pytest.approx(2 * np.pi * zeta / np.sqrt(1 - zeta**2), rel=1e-3)
    assert m.zeta_from_decrement == pytest.approx(zeta, rel=1e-3)


def test_noisy_trace_levels_and_figures_are_robust():
    rng = np.random.default_rng(7)
    t = np.linspace(-1e-3, 6e-3, 7000)
    truth = second_order_step(t, 0.3, FN, 1.2, 0.4, 0.0)
    y = truth + 0.004 * rng.standard_normal(t.size)  # 1 % of the step
    m = measure_step(TimeTrace(t, {"out": y}))
    clean = measure_step((t, truth), step_time_s=0.0)
    assert m.channel == "out"
    assert m.initial_v == pytest.approx(1.2, abs=1e-3)
    assert m.final_v == pytest.approx(1.6, abs=1e-3)
    assert m.noise_v == pytest.approx(0.004, rel=0.15)
    assert m.noise_source.startswith("flat part before the step")
    assert m.overshoot_pct == pytest.approx(clean.overshoot_pct, abs=1.0)
    assert m.rise_time_s == pytest.approx(clean.rise_time_s, rel=0.05)
    assert m.ringing_freq_hz == pytest.approx(FN * np.sqrt(1 - 0.09), rel=0.03)
    assert -5e-5 < m.step_time_s < 5e-5
    assert m.smoothing_samples > 1


def test_falling_step():
    t = np.linspace(-1e-3, 6e-3, 4000)
    m = measure_step((t, second_order_step(t, 0.3, FN, 2.0, -0.5, 0.0)))
    assert m.step_v == pytest.approx(-0.5, rel=1e-4)
    assert m.overshoot_pct == pytest.approx(100 * np.exp(-np.pi * 0.3 / np.sqrt(1 - 0.09)), abs=0.05)


def test_band_in_volts():
    _, _, tt, yy = _clean(0.3)
    wide = measure_step((tt, yy), band_v=0.05)
    narrow = measure_step((tt, yy), band=0.02)
    assert wide.band == pytest.approx(0.05)
    assert wide.settling_time_s < narrow.settling_time_s


def test_flat_trace_is_an_error():
    t = np.linspace(0, 1e-3, 1000)
    y = 1.0 + 1e-3 * np.random.default_rng(1).standard_normal(t.size)
    with pytest.raises(InputError, match="no step found"):
        measure_step((t, y))


def test_step_too_close_to_end_is_an_error():
    t = np.linspace(-1e-3, 5e-3, 3000)
    y = second_order_step(t, 0.3, FN, 1.0, 0.5, 4.7e-3)
    with pytest.raises(InputError, match="too close to the end"):
        measure_step((t, y))
    y = second_order_step(t, 0.3, FN, 1.0, 0.5, 4.2e-3)  # reaches the new level, still swinging
    with pytest.raises(InputError, match="too close to the end"):
        measure_step((t, y))


def test_nan_samples_are_an_error_naming_the_sample():
    t = np.linspace(-1e-3, 5e-3, 3000)
    y = second_order_step(t, 0.3, FN, 1.0, 0.5, 0.0)
    y[1234] = np.nan
    with pytest.raises(InputError, match="sample 1235"):
        measure_step((t, y))


def test_clipped_samples_are_flagged():
    rng = np.random.default_rng(2)
    t = np.linspace(-1e-3, 5e-3, 3000)
    y = second_order_step(t, 0.2, FN, 1.0, 0.5, 0.0) + 1e-3 * rng.standard_normal(t.size)
    clipped = np.minimum(y, 1.7)  # the scope's top code
    m = measure_step((t, clipped))
    assert m.clipped_samples == int(np.sum(clipped == 1.7)) > 3
    assert m.clipped_levels_v == (1.7,)
    assert any("clipped" in w for w in m.warnings)
    assert measure_step((t, y)).clipped_samples == 0


def test_noise_free_flat_parts_are_not_clipping():
    _, _, tt, yy = _clean(1.5)
    assert measure_step((tt, yy)).clipped_samples == 0


def test_measurement_json_round_trip():
    _, _, tt, yy = _clean(0.4)
    m = measure_step((tt, yy))
    back = StepMeasurement.from_dict(m.to_dict())
    assert back.to_dict() == m.to_dict()
    with pytest.raises(InputError):
        StepMeasurement.from_dict({"kind": "step_measurement"})
