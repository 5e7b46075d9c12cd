"""The bench-like simulated analyzer: noise density, settling and integration time, saturation."""

import math
import time

import numpy as np
import pytest

from benchfit.bench.benchlike import BenchAnalyzer, VirtualClock, tanh_describing_function
from benchfit.bench.capture import CaptureSettings, run_capture
from benchfit.bench.profile import find_profile
from benchfit.bench.sim_transport import simulated_session
from benchfit.planner.probe import Probe


def loop(f):
    f = np.asarray(f, dtype=float)
    return 1e3 / (1j * f)          # an integrator crossing 0 dB at 1 kHz


def readings(inst, f, level, bw, n, tmp_path):
    with simulated_session(inst, find_profile("generic-analyzer"), folder=tmp_path) as s:
        p = Probe(s, clock=inst.clock)
        p.configure()
        return p.read(f, level, bw, n)


def test_noise_falls_with_bandwidth_and_level(tmp_path):
    # white noise: rms grows as sqrt(bandwidth) and the ratio error as 1/level
    inst = BenchAnalyzer(loop, noise_density_v=1e-5, seed=1)
    wide = readings(inst, 1e3, 0.01, 1000.0, 40, tmp_path / "a").abs_scatter
    narrow = readings(inst, 1e3, 0.01, 10.0, 40, tmp_path / "b").abs_scatter
    loud = readings(inst, 1e3, 0.04, 1000.0, 40, tmp_path / "c").abs_scatter
    assert wide / narrow == pytest.approx(10.0, rel=0.35)     # sqrt(1000/10)
    assert wide / loud == pytest.approx(4.0, rel=0.35)
    # expected size at |T| = 1 with injection: |dT| ~ rms |1+T| sqrt(1+|T|^2) / L
    rms = 1e-5 * math.sqrt(1000.0)
    expect = rms * abs(1 + loop(1e3)) * math.sqrt(2.0) / 0.01
    assert wide == pytest.approx(expect, rel=0.35)


def test_time_is_settling_plus_integration_on_a_virtual_clock(tmp_path):
    inst = BenchAnalyzer(loop, settle_cycles=10, overhead_s=0.002)
    t0 = time.monotonic()
    r = readings(inst, 10.0, 0.01, 10.0, 3, tmp_path)
    wall = time.monotonic() - t0
    # 10 cycles at 10 Hz, then three integrations of 1/(10 Hz), plus overheads
    assert r.time_s == pytest.approx(1.0 + 3 * 0.1 + 3 * 0.002, rel=1e-6)
    assert inst.measuring_s == pytest.approx(r.time_s, rel=1e-9)
    assert wall < r.time_s            # simulated time: nothing waited for real
    assert isinstance(inst.clock, VirtualClock)


def test_bandwidth_above_the_frequency_integrates_one_cycle(tmp_path):
    inst = BenchAnalyzer(loop)
    r = readings(inst, 5.0, 0.01, 1000.0, 1, tmp_path)
    assert r.time_s == pytest.approx(1 / 5.0)


def test_describing_function_limits():
    # tanh(u) = u - u^3/3 + ...; the describing function of u^3 is 3a^2/4, so N ~ 1 - a^2/4
    # (standard describing-function result, from memory); a hard limiter of height 1 gives
    # N = 4/(pi a) for a >> 1 (ideal relay, from memory)
    x = np.array([1e-3, 0.05, 0.1])
    assert np.allclose(tanh_describing_function(x), 1 - x ** 2 / 4, atol=1e-5)
    assert tanh_describing_function(np.array([200.0]))[0] == pytest.approx(4 / (np.pi * 200), rel=0.01)
    n = tanh_describing_function(np.logspace(-2, 2, 50))
    assert np.all(np.diff(n) < 0) and np.all(n <= 1)


def test_saturation_lowers_the_gain_at_high_level(tmp_path):
    inst = BenchAnalyzer(loop, saturation_v=0.05)
    low = readings(inst, 1e3, 0.002, 100.0, 1, tmp_path / "a").mean
    high = readings(inst, 1e3, 0.2, 100.0, 1, tmp_path / "b").mean
    assert abs(low / loop(1e3) - 1) < 2e-3          # far below saturation: linear
    assert abs(high) < 0.5 * abs(loop(1e3))         # driven hard: the gain read falls


def test_a_fixed_sweep_reports_its_simulated_time(tmp_path):
    inst = BenchAnalyzer(loop, settle_cycles=5)
    with simulated_session(inst, find_profile("generic-analyzer"), folder=tmp_path) as s:
        t0 = inst.clock()
        res = run_capture(s, CaptureSettings(10, 1e4, 31, bandwidth_hz=100.0), tmp_path / "c.csv")
        spent = inst.clock() - t0
    f = CaptureSettings(10, 1e4, 31).grid()
    expect = float(np.sum(5 / f + 1 / np.minimum(100.0, f)))
    assert res.points_saved == 31
    assert spent == pytest.approx(expect, rel=1e-3)
