"""The Monte Carlo table shows a loop's worst crossings, and says when the nominal loop is unstable.

Reference library: python-control (``control.stability_margins(..., returnall=True)``, every gain
and phase crossing) on the same drawn part sets, rebuilt from the same seeded generator.  The
plant is a velocity servo with a Q = 12 resonance at 1.5 kHz; the Type II network placed for a
450 Hz crossover leaves the resonance above 0 dB (GM about −3.4 dB): unstable.
"""

import control
import numpy as np
import pytest
from scipy.signal import tf2zpk

from benchfit.fitting.model import PlantModel
from benchfit.loop.loopgain import LoopPlant
from benchfit.loop.networks import Network
from benchfit.loop.synthesis import Targets
from benchfit.loop.tolerance import Spread, draw_margins, monte_carlo, worst_crossings

W = 2 * np.pi


def servo():
    wr, q = W * 1.5e3, 12.0
    num = [20 * wr ** 2]
    den = np.polymul([1 / (W * 20), 1], [1, wr / q, wr ** 2])
    z, p, k = tf2zpk(num, den)
    return PlantModel(z, p, k), control.tf(num, den)


def as_tf(m: PlantModel):
    return control.zpk(m.zeros, m.poles, m.k)


PARTS = {"R1": 10e3, "R2": 11.8e3, "C1": 82e-9, "C2": 12e-9}


def test_worst_rows_match_python_control_on_drawn_parts():
    model, plant_tf = servo()
    net = Network("type2", PARTS)
    n, seed, r_tol, c_tol = 12, 7, 0.01, 0.10
    d = draw_margins(LoopPlant(model), net, None, Targets(phase_margin_deg=50, gain_margin_db=6),
                     r_tol=r_tol, c_tol=c_tol, draws=n, seed=seed, plant_uncertainty=False)
    rng = np.random.default_rng(seed)   # the generator draw_margins uses, in its order
    names = list(net.parts)
    tol = np.array([r_tol if k[0] == "R" else c_tol for k in names])
    factors = 1.0 + tol * rng.uniform(-1.0, 1.0, size=(n, len(names)))
    for i in range(n):
        drawn = Network("type2", {k: net.parts[k] * factors[i, j] for j, k in enumerate(names)})
        t = control.minreal(plant_tf * as_tf(drawn.model()), verbose=False)
        gm, pm, _, wpc, wgc, _ = control.stability_margins(t, returnall=True)
        gm_db = 20 * np.log10(np.asarray(gm, float))
        assert d["pm_worst_deg"][i] == pytest.approx(min(pm), abs=0.05)
        assert d["gm_worst_db"][i] == pytest.approx(gm_db[np.argmin(np.abs(gm_db))], abs=0.02)
        assert d["gm_worst_db"][i] < 0          # the resonance is above 0 dB at its phase crossing
        assert not d["stable"][i]


def test_table_says_the_nominal_loop_is_unstable():
    model, _ = servo()
    sp = monte_carlo(LoopPlant(model), Network("type2", PARTS), None,
                     Targets(phase_margin_deg=50, gain_margin_db=6), r_tol=0.01, c_tol=0.1,
                     draws=200, seed=7)
    assert sp.nominal_stable is False
    text = sp.report()
    assert text.splitlines()[0].startswith("the nominal loop is UNSTABLE")
    assert "PM, worst cross." in text and "GM, nearest 0 dB" in text
    assert sp.percentiles["pm_worst_deg"]["p99"] < 0 and sp.percentiles["gm_worst_db"]["p50"] < 0
    back = Spread.from_dict(sp.to_dict())
    assert back == sp


def test_a_stable_loop_keeps_the_plain_table():
    model, _ = servo()
    # crossover far below the resonance: R2 small, so the resonance stays below 0 dB
    net = Network("type2", {"R1": 10e3, "R2": 1.0e3, "C1": 820e-9, "C2": 12e-9})
    sp = monte_carlo(LoopPlant(model), net, None, Targets(phase_margin_deg=30, gain_margin_db=6),
                     r_tol=0.01, c_tol=0.1, draws=100, seed=1)
    assert sp.nominal_stable is True
    assert "UNSTABLE" not in sp.report()


def test_worst_crossings_rule():
    rows, f, v = np.array([0, 0, 1]), np.array([10.0, 20.0, 30.0]), np.array([60.0, -20.0, 45.0])
    prow, pf, pv = np.array([0, 0, 1]), np.array([15.0, 25.0, 35.0]), np.array([12.0, -3.0, 8.0])
    pm, gm = worst_crossings(3, (rows, f, v), (prow, pf, pv), "all")
    assert list(pm) == [-20.0, 45.0, np.inf] and list(gm) == [-3.0, 8.0, np.inf]
    pm, gm = worst_crossings(3, (rows, f, v), (prow, pf, pv), (5.0, 18.0))   # a band: only inside
    assert list(pm) == [60.0, np.inf, np.inf] and list(gm) == [12.0, np.inf, np.inf]
