"""Step fits recover known parameters from noisy synthetic traces, with honest uncertainties."""

import numpy as np
import pytest

from benchfit.errors import InputError
from benchfit.fitting.model import PlantModel
from benchfit.steps.fit import StepFit, dominant_pair, fit_step, loop_with
from benchfit.steps.models import closed_loop_unit_step, second_order_step, third_order_step


def _trace(zeta, fn, seed, noise=0.01, n=6000, t0=None):
    rng = np.random.default_rng(seed)
    span = 12.0 / (zeta * fn) if zeta < 1 else 8.0 * zeta / fn
    t = np.linspace(-0.1 * span, span, n)
    t0 = rng.uniform(-0.02, 0.02) * span if t0 is None else t0
    step = 0.25
    y = second_order_step(t, zeta, fn, 1.0, step, t0) + noise * step * rng.standard_normal(n)
    return t, y, t0


@pytest.mark.parametrize("zeta", [0.1, 0.3, 0.6, 0.9, 1.4])
def test_second_order_recovers_zeta_and_fn(zeta):
    # Truth is known by construction; tolerance: within 4 standard errors and within 3 % (ζ)
    # and 1 % (fn) at 1 % noise, the accuracy the issue asks for.
    fn = 2.5e3
    t, y, t0 = _trace(zeta, fn, seed=int(zeta * 100))
    f = fit_step((t, y))
    for name, truth, rel in (("zeta", zeta, 0.03), ("fn_hz", fn, 0.01)):
        p = f.parameter(name)
        assert abs(p.value - truth) < 4 * p.stderr, (name, p.value, p.stderr)
        assert p.value == pytest.approx(truth, rel=rel)
    assert abs(f.value("t0_s") - t0) < 4 * f.stderr("t0_s")
    assert f.stats["rms_over_noise"] == pytest.approx(1.0, abs=0.15)
    assert f.stats["converged"]
    assert f.fitted_v.shape == t.shape


def test_stderr_tracks_scatter_over_seeds():
    # The stated σ of ζ should match the scatter of ζ over independent noise draws (within 35 %).
    vals, errs = [], []
    for seed in range(12):
        t, y, _ = _trace(0.4, 1e3, seed=seed, n=3000)
        f = fit_step((t, y))
        vals.append(f.value("zeta"))
        errs.append(f.stderr("zeta"))
    assert np.std(vals, ddof=1) == pytest.approx(np.mean(errs), rel=0.35)


def test_third_order_recovers_real_pole():
    rng = np.random.default_rng(11)
    t = np.linspace(-2e-4, 3e-3, 8000)
    y = third_order_step(t, 0.35, 3e3, 6e3, 0.0, 1.0, 2e-5) + 0.003 * rng.standard_normal(t.size)
    f = fit_step((t, y), model="third-order")
    for name, truth in (("zeta", 0.35), ("fn_hz", 3e3), ("fp_hz", 6e3)):
        assert abs(f.value(name) - truth) < 4 * f.stderr(name), name
    # the second-order fit of the same trace leaves structure in the residuals
    so = fit_step((t, y))
    assert so.stats["rms_over_noise"] > f.stats["rms_over_noise"]


def test_clipped_samples_are_left_out():
    t, y, _ = _trace(0.2, 2e3, seed=5)
    top = 1.0 + 0.25 * 1.4
    f = fit_step((t, np.minimum(y, top)))
    assert f.stats["excluded_points"] == int(np.sum(np.minimum(y, top) == top)) > 0
    assert f.value("zeta") == pytest.approx(0.2, rel=0.03)
    assert any("clipped" in w for w in f.warnings)


def test_loop_fit_refines_gain_and_pair():
    # Loop gain: integrator (4 kHz unity-gain) times a resonant pair at 10 kHz, ζ 0.3.  The
    # "measured" trace comes from the same loop with 1.25x the gain and the pair 8 % higher;
    # the loop fit finds both within its standard errors.
    wc, w0 = 2 * np.pi * 4e3, 2 * np.pi * 10e3
    loop = PlantModel(zeros=[], poles=[0.0, *np.roots([1, 2 * 0.3 * w0, w0**2])], k=wc * w0**2)
    pair = dominant_pair(loop)
    assert pair is not None
    truth = loop_with(loop, 1.25, pair, 10.8e3, 0.3)
    t = np.linspace(-1e-4, 1.5e-3, 6000)
    u, _ = closed_loop_unit_step(t - 1e-5, truth)
    y = 2.0 + 0.3 * u + 0.003 * np.random.default_rng(9).standard_normal(t.size)
    f = fit_step((t, y), model="loop", loop=loop)
    for name, value in (("loop_gain", 1.25), ("pair_fn_hz", 10.8e3), ("pair_zeta", 0.3)):
        assert abs(f.value(name) - value) < 4 * f.stderr(name), name
    assert f.loop_model is not None
    f_test = np.logspace(2, 5, 50)
    np.testing.assert_allclose(f.loop_model.response(f_test), truth.response(f_test), rtol=0.01)


def test_loop_with_identity():
    loop = PlantModel(zeros=[], poles=[0.0, -1e3, -5e4], k=1e7)
    pair = dominant_pair(loop)  # two real poles become a pair with ζ ≥ 1
    a, b = loop.poles[list(pair)]
    wn = np.sqrt(abs(a * b))
    same = loop_with(loop, 1.0, pair, wn / (2 * np.pi), float(-(a + b).real / (2 * wn)))
    f = np.logspace(1, 6, 40)
    np.testing.assert_allclose(same.response(f), loop.response(f), rtol=1e-9)


def test_fit_errors_and_round_trip():
    t, y, _ = _trace(0.5, 1e3, seed=1, n=2000)
    with pytest.raises(InputError, match="unknown"):
        fit_step((t, y), model="fourth-order")
    with pytest.raises(InputError, match="loop gain"):
        fit_step((t, y), model="loop")
    f = fit_step((t, y))
    back = StepFit.from_dict(f.to_dict())
    assert back.to_dict() == f.to_dict()
    assert "curve" not in f.to_dict(include_curve=False)
