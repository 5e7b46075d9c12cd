"""Model-free step figures on scipy.signal.step traces against the exact second-order formulas.

Handbook formulas of the underdamped second-order step ωn²/(s² + 2ζωn s + ωn²):
overshoot = exp(−πζ/√(1−ζ²)), t_peak = π/(ωn√(1−ζ²)), ringing at fd = fn√(1−ζ²), log
decrement per period δ = 2πζ/√(1−ζ²).  Traces from ``scipy.signal.step`` with a step instant
between samples, an offset, and noise at 1e-4 of the step (almost clean).
"""

import math

import numpy as np
import pytest
import scipy.signal as ss

from benchfit.steps.lobes import LOBE_SNR, lobes_kept
from benchfit.steps.measure import measure_step

CASES = [  # zeta, fn, t0, v0, dv, samples, span, pre-trigger
    (0.35, 12e3, 37.3e-6, 1.20, 0.60, 5000, 500e-6, 50e-6),
    (0.15, 3e3, 0.8e-3, 0.0, 1.0, 10000, 5e-3, 1e-3),
    (0.60, 50e3, 3.1e-6, 3.3, -0.2, 4000, 60e-6, 10e-6),
    (0.25, 8e3, 15e-6, 0.0, 0.05, 3000, 1e-3, 0.2e-3),
]


def trace(z, fn, t0, v0, dv, n, span, pre, noise=1e-4, seed=0):
    wn = 2 * np.pi * fn
    t = np.linspace(-pre, span - pre, n)
    tt = t - t0
    _, y = ss.step(ss.lti([wn ** 2], [1, 2 * z * wn, wn ** 2]), T=tt[tt >= 0])
    out = np.full(n, v0)
    out[tt >= 0] = v0 + dv * y
    return t, out + np.random.default_rng(seed).normal(0, noise * abs(dv), n)


@pytest.mark.parametrize("case", CASES)
def test_clean_step_figures_match_the_second_order_formulas(case):
    z, fn, t0, v0, dv, n, span, pre = case
    m = measure_step(trace(*case))
    root = math.sqrt(1 - z * z)
    dt = span / (n - 1)
    assert m.step_time_s == pytest.approx(t0, abs=2 * dt)            # was 6-37 samples late
    tp = math.pi / (2 * math.pi * fn * root)
    assert m.peak_time_s == pytest.approx(tp, rel=3e-3)              # was 1.0-1.8 % short
    assert m.overshoot_pct == pytest.approx(100 * math.exp(-math.pi * z / root), rel=3e-3)
    if math.isfinite(m.ringing_freq_hz):
        assert m.ringing_freq_hz == pytest.approx(fn * root, rel=2e-3)      # was up to -3 %
    if math.isfinite(m.log_decrement):
        tol = 1.5e-2 if z > 0.5 else 3e-3                               # ζ 0.6: two lobes only
        assert m.log_decrement == pytest.approx(2 * math.pi * z / root, rel=tol)   # was 1.2-5 % low


def test_lobes_kept_stops_at_the_noise_floor():
    peaks = [0.3, -0.09, 0.027, -0.008, 0.0024]
    assert lobes_kept(peaks, 0.0) == 5
    assert lobes_kept(peaks, 0.001) == 3          # |0.008| < 10 × 0.001
    assert lobes_kept(peaks, 0.1 / LOBE_SNR) == 1
