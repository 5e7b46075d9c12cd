"""Step-response models against scipy.signal and python-control (reference libraries)."""

import math

import control
import numpy as np
import pytest
from scipy import signal

from benchfit.errors import InputError
from benchfit.fitting.model import PlantModel
from benchfit.steps.models import (
    closed_loop_unit_step,
    closed_loop_zpk,
    overshoot_pct_from_zeta,
    rational_unit_step,
    second_order_step,
    third_order_step,
    zeta_from_log_decrement,
    zeta_from_overshoot_pct,
)

WN = 2 * np.pi * 3e3
T = np.linspace(0.0, 3e-3, 4001)  # starts at exactly 0: scipy's step starts its input at T[0]


@pytest.mark.parametrize("zeta", [0.02, 0.3, 0.7, 0.9999999, 1.0, 1.0000001, 1.7, 12.0])
def test_second_order_matches_scipy_step(zeta):
    # Reference: scipy.signal.step of wn²/(s² + 2ζwn s + wn²) (general-purpose reference library).
    _, ref = signal.step(([WN**2], [1.0, 2 * zeta * WN, WN**2]), T=T)
    ours = second_order_step(T, zeta, WN / (2 * np.pi), 0.0, 1.0, 0.0)
    assert np.max(np.abs(ours - ref)) < 1e-9


def test_second_order_levels_and_offset():
    t = np.linspace(-1e-3, 2e-3, 3001)
    y = second_order_step(t, 0.4, 3e3, 1.5, -0.25, 2e-4)
    assert np.all(y[t <= 2e-4] == 1.5)
    _, ref = signal.step(([WN**2], [1.0, 0.8 * WN, WN**2]), T=T)
    later = t >= 2e-4
    # linear interpolation of the reference between its samples limits the agreement to ~1e-5
    np.testing.assert_allclose(y[later], 1.5 - 0.25 * np.interp(t[later] - 2e-4, T, ref), atol=2e-5)


@pytest.mark.parametrize("zeta,fp", [(0.4, 9e3), (1.0, 3e3), (2.0, 1e3)])
def test_third_order_matches_scipy_step(zeta, fp):
    # Reference: scipy.signal.step of the same zpk system.
    a = 2 * np.pi * fp
    den = np.polymul([1.0, 2 * zeta * WN, WN**2], [1.0, a])
    _, ref = signal.step(([WN**2 * a], den), T=T)
    ours = third_order_step(T, zeta, WN / (2 * np.pi), fp, 0.0, 1.0, 0.0)
    assert np.max(np.abs(ours - ref)) < 1e-8


def test_rational_with_zeros_and_repeated_poles_nonuniform_time():
    z, p, k = [-2e3], [-5e3, -5e3, -1e4 + 2e4j, -1e4 - 2e4j], 3e12
    fine = np.linspace(0.0, 2e-3, 20001)
    pick = np.sort(np.random.default_rng(0).choice(np.arange(1, fine.size), 300, replace=False))
    t = fine[pick]  # unevenly spaced instants
    # Reference: python-control's step response on the uniform grid, read at the same instants.
    ref = control.step_response(control.zpk(z, p, k), T=fine).outputs[pick]
    assert np.max(np.abs(rational_unit_step(t, z, p, k) - ref)) < 1e-6 * np.max(np.abs(ref))


def test_rational_rejects_improper():
    with pytest.raises(InputError, match="more zeros than poles"):
        rational_unit_step(T, [-1.0, -2.0], [-3.0], 1.0)


def test_delayed_loop_step_is_exact():
    # Loop K·e^(−sτ)/s: the closed-loop step expands as the series
    # y(t) = Σ_{n≥1} (−1)^(n+1) K^n (t − nτ)^n / n! · H(t − nτ)
    # (inverse Laplace transform term by term of K e^(−sτ)/(s(s + K e^(−sτ))), a standard result).
    # A Padé approximant would show ringing before t = τ and a wrong overshoot.
    K, tau_d = 1.2e4, 60e-6
    loop = PlantModel(zeros=[], poles=[0.0], k=K, delay_s=tau_d)
    t = np.linspace(0.0, 8e-4, 801)
    exact = np.zeros_like(t)
    for n in range(1, 40):
        s_ = np.clip(t - n * tau_d, 0.0, None)
        exact += (-1) ** (n + 1) * (K * s_) ** n / math.factorial(n)
    u, dc = closed_loop_unit_step(t, loop)
    assert dc == pytest.approx(1.0)
    assert np.all(u[t < tau_d] == 0.0)
    assert np.max(np.abs(u - exact)) < 1e-5
    with pytest.raises(InputError, match="no rational closed loop"):
        closed_loop_zpk(loop)


def test_closed_loop_matches_control_feedback():
    loop = PlantModel(zeros=[-2e4], poles=[0.0, -3e3, -8e4 + 6e4j, -8e4 - 6e4j], k=4e9)
    z, p, k = closed_loop_zpk(loop)
    # Reference: python-control feedback(L, 1) = L/(1+L).
    ref = control.feedback(control.zpk(loop.zeros, loop.poles, loop.k), 1)
    np.testing.assert_allclose(np.sort_complex(p), np.sort_complex(ref.poles()), rtol=1e-7)
    u, dc = closed_loop_unit_step(T, loop)
    assert dc == pytest.approx(1.0)  # an integrator in the loop: unity DC gain
    rt = control.step_response(ref, T=T).outputs
    assert np.max(np.abs(u - rt)) < 1e-7


def test_unstable_closed_loop_is_an_input_error():
    loop = PlantModel(zeros=[], poles=[0.0, -1e3, -1e3], k=1e10)
    with pytest.raises(InputError, match="unstable"):
        closed_loop_unit_step(T, loop)


def test_overshoot_relations():
    # %OS = 100·exp(−πζ/√(1−ζ²)) (standard textbook formula); ζ = 0.5 gives 16.30 %.
    assert overshoot_pct_from_zeta(0.5) == pytest.approx(16.3033535, rel=1e-6)
    assert overshoot_pct_from_zeta(1.2) == 0.0
    for z in (0.05, 0.3, 0.8):
        assert zeta_from_overshoot_pct(overshoot_pct_from_zeta(z)) == pytest.approx(z, rel=1e-12)
    # δ = 2πζ/√(1−ζ²) per period (textbook log decrement), inverted.
    for z in (0.02, 0.2, 0.6):
        assert zeta_from_log_decrement(2 * np.pi * z / np.sqrt(1 - z * z)) == pytest.approx(z, rel=1e-12)
