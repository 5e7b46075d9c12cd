"""The planner's parameter draws: which covariance scale, which coordinates (benchfit.planner.draws)."""

import dataclasses
import math

import numpy as np
import pytest
from scipy import stats

from benchfit.data.response import FrequencyResponse
from benchfit.fitting import fit
from benchfit.fitting.model import PlantModel
from benchfit.planner.draws import covariance_scale, draw_responses, log_coordinates
from benchfit.planner.uncertainty import consistent_draws


def test_covariance_scale_never_shrinks_below_the_measured_noise():
    # the fitter scales by chi2_red; the planner keeps the unscaled (J^T J)^-1 below 1 and
    # inflates above 1 (scale factor only when > 1: Particle Data Group convention, from memory)
    assert covariance_scale(0.5) == pytest.approx(2.0)
    assert covariance_scale(1.0) == 1.0
    assert covariance_scale(3.0) == 1.0
    assert covariance_scale(float("nan")) == 1.0 and covariance_scale(None) == 1.0
    assert covariance_scale(0.0) == 1.0


def test_log_coordinates_only_for_positive_parameters_of_a_ratio_kind():
    names = ["gain", "pole1_hz", "pair1_f0_hz", "pair1_q", "zero1_hz", "delay_s", "gain"]
    values = [2.0, 100.0, 1e3, 0.7, -5e3, 1e-6, -3.0]
    assert log_coordinates(names, values).tolist() == [True, True, True, True, False, True, False]


def test_log_draws_of_a_gain_are_lognormal():
    # reference: scipy.stats.lognorm with shape sigma/value and scale value (the first-order
    # carry of sigma to ln v); a Kolmogorov-Smirnov test of the drawn gain against it
    f = np.logspace(1, 3, 10)
    res = fit(FrequencyResponse(f, 2.0 / (1 + 1j * f / 100), quantity="plant"), order=1, delay="none")
    v = res.parameter("gain").value
    cov = np.zeros((len(res.varied),) * 2)
    k = res.varied.index("gain")
    cov[k, k] = (0.3 * v) ** 2                   # only the gain is drawn, 30 % sigma
    res = dataclasses.replace(res, covariance=cov, stats={**res.stats, "reduced_chi2": 1.0})
    f0 = np.array([1e-6])                        # far below the pole: H = gain
    g = np.abs(draw_responses(res, f0, 4000, np.random.default_rng(4))[:, 0])
    assert stats.kstest(g, stats.lognorm(s=0.3, scale=v).cdf).pvalue > 0.01
    assert np.all(g > 0)                         # a log draw never crosses zero


def test_log_draws_stay_in_the_valley_the_data_leave_loose():
    # a pole pair below the band: only gain*f0^2 is measured (correlation -1.00); linear
    # draws along that direction leave the curved valley and the data contradict them,
    # log draws follow it.  Reference for "contradict": the chi-square excess test
    # (benchfit.planner.uncertainty.consistent_draws, chi-square law from scipy.stats).
    rng = np.random.default_rng(5)
    w0, q = 2 * np.pi * 180, 0.8
    m = PlantModel(zeros=np.array([]), poles=np.roots([1, w0 / q, w0 ** 2]), k=1e3 * w0 ** 2)
    f = np.logspace(math.log10(600), math.log10(5e4), 20)
    h = m.response(f)
    sd = 0.15 * np.abs(h)
    meas = h + sd / np.sqrt(2) * (rng.standard_normal(f.size) + 1j * rng.standard_normal(f.size))
    res = fit(FrequencyResponse(f, meas, stddev=sd, quantity="plant"), order=2, delay="none")
    redchi = max(float(res.stats["reduced_chi2"]), 1.0)
    frac = {}
    for name, T in (("linear", res.draw_responses(f, 400, np.random.default_rng(1))),
                    ("log", draw_responses(res, f, 400, np.random.default_rng(1)))):
        frac[name] = consistent_draws(T, meas, sd, res.response(f), len(res.varied), redchi).mean()
    assert frac["log"] >= 0.9
    assert frac["log"] > frac["linear"]
