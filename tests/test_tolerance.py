"""Monte Carlo spread: reproducibility, sanity, and closed-form checks.

The closed-form checks use an integrator loop T = 1/(s·R1·C1) on a flat
plant, whose crossover is exactly 1/(2π·R1·C1) with a phase margin of 90°
(textbook Bode analysis of an integrator), so the distribution of the
crossover over the draws is known exactly.
"""

import numpy as np
import pytest

from benchfit.errors import InputError
from benchfit.fitting.model import PlantModel
from benchfit.loop.loopgain import Loop, LoopPlant
from benchfit.loop.networks import Network
from benchfit.loop.opamp import OpAmp
from benchfit.loop.passrules import margins_meet
from benchfit.loop.synthesis import Targets, synthesize
from benchfit.loop.tolerance import monte_carlo

FLAT = LoopPlant(PlantModel(zeros=np.array([]), poles=np.array([-2 * np.pi * 1e6]), k=2 * np.pi * 1e6),
                 band_hz=(1.0, 1e5))


def buck_plant():
    # our own scenario: 12 V buck, L = 10 uH, C = 100 uF, ESR 20 mohm, 1 ohm load
    L, C, esr, r = 10e-6, 100e-6, 0.02, 1.0
    w0 = 1 / np.sqrt(L * C)
    q = r * np.sqrt(C / L)
    wz = 1 / (esr * C)
    return PlantModel(zeros=np.array([-wz]), poles=np.roots([1, w0 / q, w0 ** 2]), k=12 * w0 ** 2 / wz)


def integrator(fc=1e3):
    return Network("type1", {"R1": 10e3, "C1": 1 / (2 * np.pi * 10e3 * fc)})


def test_seed_reproducible_and_seeds_differ():
    lp = LoopPlant(buck_plant(), band_hz=(10, 1e6))
    syn = synthesize("type3", lp, Targets(20e3, 50, 10))
    a = monte_carlo(lp, syn.network, None, Targets(20e3, 50, 10), r_tol=0.01, c_tol=0.1,
                    draws=500, seed=7)
    b = monte_carlo(lp, syn.network, None, Targets(20e3, 50, 10), r_tol=0.01, c_tol=0.1,
                    draws=500, seed=7)
    c = monte_carlo(lp, syn.network, None, Targets(20e3, 50, 10), r_tol=0.01, c_tol=0.1,
                    draws=500, seed=8)
    assert a.to_dict() == b.to_dict()
    assert a.percentiles["pm_deg"] != c.percentiles["pm_deg"]
    for key in ("pm_deg", "gm_db", "crossover_hz"):
        v = [a.percentiles[key][f"p{p}"] for p in (1, 5, 50, 95, 99)]
        assert v == sorted(v), key
    # the nominal design sits at 50°: the median draw sits near it, the tails on both sides
    assert a.percentiles["pm_deg"]["p50"] == pytest.approx(50, abs=1.5)
    assert a.percentiles["pm_deg"]["p1"] < 50 < a.percentiles["pm_deg"]["p99"]
    assert 0 < a.yield_fraction < 1


def test_zero_tolerance_gives_full_yield_and_nominal_margins():
    lp = LoopPlant(buck_plant(), band_hz=(10, 1e6))
    op = OpAmp(gbw_hz=20e6)
    t = Targets(20e3, 45, 6)
    syn = synthesize("type3", lp, t, opamp=op)
    nominal = Loop(lp, syn.network, op).margins()
    s = monte_carlo(lp, syn.network, op, t, r_tol=0.0, c_tol=0.0, draws=200, seed=1)
    # every draw is the nominal loop: the yield is the nominal verdict, no slack either way
    # (synthesis places on its own screening grid: the dense nominal may sit a hair off 45°)
    assert s.yield_fraction == (1.0 if margins_meet(nominal, t) else 0.0)
    for pm_target in (nominal.phase_margin_deg - 1e-6, nominal.phase_margin_deg + 1e-6):
        tt = Targets(20e3, pm_target, 6)
        y = monte_carlo(lp, syn.network, op, tt, r_tol=0.0, c_tol=0.0, draws=20, seed=1)
        assert y.yield_fraction == (1.0 if pm_target < nominal.phase_margin_deg else 0.0)
    assert s.unstable_fraction == 0.0
    assert s.percentiles["pm_deg"]["p1"] == s.percentiles["pm_deg"]["p99"]
    assert s.percentiles["pm_deg"]["p50"] == pytest.approx(nominal.phase_margin_deg, abs=1e-9)
    assert s.percentiles["gm_db"]["p50"] == pytest.approx(nominal.gain_margin_db, abs=1e-9)
    assert s.percentiles["crossover_hz"]["p50"] == pytest.approx(20e3, rel=0.01)


def test_capacitor_spread_of_integrator_crossover_closed_form():
    # crossover = fc / (1 + tol·u), u ~ U(−1, 1): its 5th percentile is fc/(1 + 0.9·tol)
    tol = 0.2
    s = monte_carlo(FLAT, integrator(1e3), None, Targets(None, 80, 0), r_tol=0.0, c_tol=tol,
                    draws=10_000, seed=3)
    pc = s.percentiles["crossover_hz"]
    assert pc["p50"] == pytest.approx(1e3, rel=0.01)
    assert pc["p5"] == pytest.approx(1e3 / (1 + 0.9 * tol), rel=0.01)
    assert pc["p95"] == pytest.approx(1e3 / (1 - 0.9 * tol), rel=0.01)
    assert s.percentiles["pm_deg"]["p50"] == pytest.approx(90, abs=0.5)


def test_plant_draws_are_used():
    # plant gain drawn log-normal (sigma 0.1): the integrator loop's crossover scales with it,
    # so its 95th percentile is fc·exp(1.645·0.1) (normal quantile, any statistics table)
    def draws(f, n, rng):
        g = np.exp(0.1 * rng.standard_normal((n, 1)))
        return g * FLAT.plant.response(f)[None, :]

    lp = LoopPlant(FLAT.plant, band_hz=FLAT.band_hz, draws=draws)
    s = monte_carlo(lp, integrator(1e3), None, Targets(None, 80, 0), r_tol=0.0, c_tol=0.0,
                    draws=10_000, seed=4)
    assert s.plant_uncertainty
    assert s.percentiles["crossover_hz"]["p95"] == pytest.approx(1e3 * np.exp(1.645 * 0.1), rel=0.01)
    off = monte_carlo(lp, integrator(1e3), None, Targets(None, 80, 0), r_tol=0.0, c_tol=0.0,
                      draws=100, seed=4, plant_uncertainty=False)
    assert not off.plant_uncertainty


def test_bad_tolerance_raises():
    with pytest.raises(InputError, match="tolerance"):
        monte_carlo(FLAT, integrator(), None, Targets(), r_tol=1.5, c_tol=0.1, draws=10)
    with pytest.raises(InputError, match="draws"):
        monte_carlo(FLAT, integrator(), None, Targets(), r_tol=0.1, c_tol=0.1, draws=0)


def test_draw_arrays_agree_with_percentiles():
    from benchfit.loop.tolerance import draw_margins

    args = dict(r_tol=0.05, c_tol=0.1, draws=400, seed=11)
    lp = LoopPlant(buck_plant(), band_hz=(10, 1e6))
    net = synthesize("type3", lp, Targets(20e3, 50, 10)).network
    d = draw_margins(lp, net, None, Targets(20e3, 50, 10), **args)
    s = monte_carlo(lp, net, None, Targets(20e3, 50, 10), **args)
    assert d["pm_deg"].shape == (400,)
    assert np.median(d["pm_deg"]) == pytest.approx(s.percentiles["pm_deg"]["p50"], abs=0.2)
    assert d["passed"].mean() == s.yield_fraction
