"""Model-free step figures on noise: the overshoot from a fitted peak, a noise estimate that
quantisation does not step.

References: the second-order step's overshoot %OS = 100·exp(−πζ/√(1−ζ²)) (standard
textbook formula); numpy's sample standard deviation of the same Gaussian draws;
Sheppard's correction q²/12 for grouped data (from memory: Sheppard 1898).
"""

import math

import numpy as np
import pytest

from benchfit.steps.features import quantum, robust_sigma
from benchfit.steps.lobes import fitted_peak
from benchfit.steps.measure import measure_step


def _step(zeta: float, fn: float, t: np.ndarray) -> np.ndarray:
    wn = 2 * math.pi * fn
    wd = wn * math.sqrt(1 - zeta ** 2)
    tt = np.maximum(t, 0.0)
    y = 1 - np.exp(-zeta * wn * tt) * (np.cos(wd * tt) + zeta / math.sqrt(1 - zeta ** 2)
                                       * np.sin(wd * tt))
    return np.where(t >= 0, y, 0.0)


@pytest.mark.parametrize("noise_v", [2e-3, 5e-3, 10e-3])
def test_overshoot_bias_on_noise_is_within_the_noise(noise_v):
    # ζ = 0.8: 1.52 % overshoot, 1 V step, 4000 samples; the maximum of the (smoothed) noisy
    # samples read 1.75-2.12 % here: the fitted peak must be unbiased within its own scatter
    zeta, seeds = 0.8, 40
    t = -400e-6 + 1e-6 * np.arange(4000)
    truth = 100 * math.exp(-math.pi * zeta / math.sqrt(1 - zeta ** 2))    # textbook %OS
    got = []
    for seed in range(seeds):
        y = _step(zeta, 2e3, t) + np.random.default_rng(seed).normal(0, noise_v, t.size)
        m = measure_step((t, y))
        assert m.peak_method.startswith("fitted peak"), m.peak_method
        got.append(m.overshoot_pct)
    got = np.array(got)
    se = got.std(ddof=1) / math.sqrt(seeds)
    assert abs(got.mean() - truth) <= 3 * se + 0.005, (got.mean(), truth, se)
    # each estimate within the noise: a few of its standard deviations of the step
    assert np.all(np.abs(got - truth) < 100 * 3 * noise_v), got


def test_fitted_peak_on_a_clean_lobe_and_the_fallback():
    t = np.linspace(0, 1, 401)
    y = 1 + 0.2 * np.sin(np.pi * t)        # one lobe of height 0.2 at t = 0.5
    pk = fitted_peak(t, y, y, level=1.0)
    assert pk.value == pytest.approx(1.2, abs=1e-5) and pk.time_s == pytest.approx(0.5, abs=1e-3)
    short = fitted_peak(t[:6], y[:6] + 0.5, y[:6] + 0.5, level=1.0)
    assert short.method == "smoothed maximum"


def test_noise_of_a_quantised_trace_is_not_stepped_by_the_codes():
    # 5 mV of noise on 1 mV codes: the MAD could only read 4.4 or 5.9 mV
    est = []
    for seed in range(30):
        x = np.random.default_rng(seed).normal(0.3, 5e-3, 600)
        q = np.round(x / 1e-3) * 1e-3
        assert quantum(q) == pytest.approx(1e-3, rel=1e-6)
        ref = float(np.std(x, ddof=1))                       # numpy on the unquantised draws
        est.append(robust_sigma(q))
        assert est[-1] == pytest.approx(ref, rel=0.05)
    assert len({round(v, 7) for v in est}) > 20               # a continuum, not two values
    assert np.mean(est) == pytest.approx(5e-3, rel=0.03)


def test_robust_sigma_is_robust_and_plain_on_gaussian_noise():
    rng = np.random.default_rng(4)
    x = rng.normal(0, 1.0, 5000)
    assert quantum(x) == 0.0
    assert robust_sigma(x) == pytest.approx(np.std(x, ddof=1), rel=0.01)
    spiky = x.copy()
    spiky[::100] = 50.0                                        # 1 % outliers at 50 sigma
    assert robust_sigma(spiky) == pytest.approx(np.std(x, ddof=1), rel=0.03)


def test_noise_of_a_measured_step_with_adc_codes():
    t = -400e-6 + 1e-6 * np.arange(4000)
    vals = []
    for seed in range(10):
        y = _step(0.8, 2e3, t) + np.random.default_rng(seed).normal(0, 5e-3, t.size)
        m = measure_step((t, np.round(y / 1e-3) * 1e-3))
        vals.append(m.noise_v)
    # 400 samples before the step: the standard error of σ is about σ/√800 (3.5 %)
    assert np.all(np.abs(np.array(vals) / 5e-3 - 1) < 0.12), vals
    assert len({round(v, 6) for v in vals}) >= 8
