"""K-factor placement: the designed loop meets the requested crossover and phase margin.

The method is Venable's K factor (H. Dean Venable, "The K factor: a new
mathematical tool for stability analysis and synthesis", Powercon 10, 1983).
The check is self-consistency against an independent margin computation:
python-control's ``stability_margins`` (general-purpose reference library)
on the loop T = plant · sensing · compensator built from the designed parts.
"""

import math

import control
import numpy as np
import pytest

from benchfit.errors import DesignError
from benchfit.fitting.model import PlantModel
from benchfit.loop.loopgain import Loop, LoopPlant
from benchfit.loop.sensing import Sensing
from benchfit.loop.synthesis import (
    Targets,
    boost_needed,
    k_from_boost,
    place,
    plant_slope_db,
    rate_of_closure,
    synthesize,
)


def reference_margins(t: PlantModel, fc_hz: float):
    """python-control stability_margins of T, with s scaled by ωc for good numerics."""
    wc = 2 * np.pi * fc_hz
    z, p = t.zeros / wc, t.poles / wc
    k = t.k * wc ** (len(t.zeros) - len(t.poles))
    sys = control.zpk(z, p, k)
    # returnall: a resonant plant can add gain crossings away from fc; the
    # K factor sets the margin at fc, so compare at the crossing nearest fc
    gm, pm, sm, wpc, wgc, wms = control.stability_margins(sys, returnall=True)
    i = int(np.argmin(np.abs(np.log(wgc))))
    return pm[i], wgc[i] * wc / (2 * np.pi)


def random_plant(rng, family):
    if family == "lc":  # buck-like: double pole with damping, ESR zero
        f0 = 10 ** rng.uniform(2.5, 4)
        q = rng.uniform(0.5, 5)
        w0 = 2 * np.pi * f0
        wesr = w0 * 10 ** rng.uniform(0.7, 1.5)
        poles = np.roots([1, w0 / q, w0 ** 2])
        k = 10 ** rng.uniform(0, 1.5) * w0 ** 2 / wesr
        return PlantModel(zeros=np.array([-wesr]), poles=poles, k=k), f0
    fp = 10 ** rng.uniform(1, 3)  # single pole (current-mode-like)
    fp2 = fp * 10 ** rng.uniform(2, 3)
    k = 10 ** rng.uniform(0, 2) * (2 * np.pi) ** 2 * fp * fp2
    return PlantModel(zeros=np.array([]), poles=np.array([-2 * np.pi * fp, -2 * np.pi * fp2]), k=k), fp


CASES = []
_rng = np.random.default_rng(2024)
for i in range(40):
    kind = ["type2", "type3", "pi"][i % 3]
    family = "lc" if kind == "type3" else ["lc", "pole"][i % 2]
    CASES.append((i, kind, family))


@pytest.mark.parametrize("case,kind,family", CASES)
def test_k_factor_meets_crossover_and_phase_margin(case, kind, family):
    rng = np.random.default_rng(case)
    plant, f_ref = random_plant(rng, family)
    div = Sensing.divider(10 ** rng.uniform(3, 4.5), 10 ** rng.uniform(3, 4.5))
    lp = LoopPlant(plant, div)
    # pick a crossover and a target whose boost the network can give
    for _ in range(200):
        fc = f_ref * 10 ** rng.uniform(-0.3, 1.3)
        phi = math.degrees(np.angle(lp.response(np.array([fc]))[0]))
        boost = rng.uniform(15, 80 if kind != "type3" else 160)
        pm = boost + 90 + phi
        pm = (pm + 180) % 360 - 180
        if 25 <= pm <= 85:
            break
    else:
        pytest.skip("no feasible target drawn")
    net, b, k, _ = place(kind, lp.response(np.array([fc]))[0], fc, pm, r_in=10 ** rng.uniform(3, 5))
    t = Loop(lp, net, None).model()
    pm_ref, fc_ref = reference_margins(t, fc)
    assert pm_ref == pytest.approx(pm, abs=0.1)
    assert fc_ref == pytest.approx(fc, rel=1e-3)


def test_k_factor_formulas():
    # Venable 1983: type2 boost = 2·atan(K) − 90°, type3 boost = 4·atan(√K) − 180°
    for b in (10.0, 45.0, 80.0):
        k2 = k_from_boost("type2", b)
        assert math.degrees(2 * math.atan(k2)) - 90 == pytest.approx(b, abs=1e-9)
    for b in (30.0, 120.0, 170.0):
        k3 = k_from_boost("type3", b)
        assert math.degrees(4 * math.atan(math.sqrt(k3))) - 180 == pytest.approx(b, abs=1e-9)
    assert k_from_boost("type2", 0.0) == pytest.approx(1.0)


def test_boost_sign_convention():
    # a plant at −120° and a 60° target: T must sit at −120° at fc, the
    # integrator gives −90°, so the network must give back +30°... −120 − 90 + b = −120 → b = 90
    assert boost_needed(np.exp(1j * math.radians(-120)), 60.0) == pytest.approx(90.0)
    assert boost_needed(np.exp(1j * math.radians(-45)), 60.0) == pytest.approx(15.0)


def test_type2_component_values_hand_example():
    # Worked by hand (values from memory of the usual type2 algebra, derived in
    # synthesis.py's docstring): plant 0.5∠−100° at 10 kHz, PM 60°, R1 = 10k.
    # boost = 60 − 90 + 100 = 70° -> K = tan(80°) = 5.671; fz = 1763 Hz, fp = 56.71 kHz;
    # |C(fc)| = 2 = K·ωi/ωc -> ωi = 2·ωc/K; C1 + C2 = 1/(R1·ωi).
    p = 0.5 * np.exp(1j * math.radians(-100))
    net, boost, k, _ = place("type2", p, 10e3, 60.0, 10e3)
    assert boost == pytest.approx(70.0)
    assert k == pytest.approx(math.tan(math.radians(80)))
    c = net.corners_hz()
    assert c["zeros_hz"][0] == pytest.approx(10e3 / k, rel=1e-9)
    assert c["poles_hz"][0] == pytest.approx(10e3 * k, rel=1e-9)
    wi = 2 * 2 * np.pi * 10e3 / k
    assert net.parts["C1"] + net.parts["C2"] == pytest.approx(1 / (10e3 * wi), rel=1e-12)
    assert abs(net.response(np.array([10e3]))[0]) == pytest.approx(2.0, rel=1e-9)


def test_too_much_boost_raises_design_error():
    p = np.exp(1j * math.radians(-175))  # needs 145° of boost for 60°
    with pytest.raises(DesignError, match="type3"):
        place("type2", p, 1e3, 60.0, 10e3)
    net, boost, _, _ = place("type3", p, 1e3, 60.0, 10e3)
    assert boost == pytest.approx(145.0)


def test_small_boost_is_clamped_with_a_note():
    p = np.exp(1j * math.radians(-20))  # PM 60 needs −10° : a type2 cannot take phase away
    net, boost, _, notes = place("type2", p, 1e3, 60.0, 10e3)
    assert boost == 5.0 and notes and "exceed" in notes[0]


def test_plant_slope_of_integrator_and_double_pole():
    # |1/s| falls at 20 dB/decade, |1/s²| at 40 (textbook Bode asymptotes)
    one = LoopPlant(PlantModel(zeros=np.array([]), poles=np.array([0j]), k=1.0))
    two = LoopPlant(PlantModel(zeros=np.array([]), poles=np.array([0j, 0j]), k=1.0))
    f = np.array([10.0, 1e3])
    np.testing.assert_allclose(plant_slope_db(one, f), -20, atol=1e-9)
    np.testing.assert_allclose(plant_slope_db(two, f), -40, atol=1e-9)
    # a type2's flat region against −20 dB/dec closes at 20 dB/dec
    np.testing.assert_allclose(rate_of_closure("type2", one, f), 20, atol=1e-9)
    np.testing.assert_allclose(rate_of_closure("type3", two, f), 20, atol=1e-9)


def test_targets_validate():
    from benchfit.errors import InputError

    with pytest.raises(InputError, match="phase-margin"):
        Targets(phase_margin_deg=200)
    with pytest.raises(InputError, match="crossover"):
        Targets(crossover_hz=-1)
    t = Targets(crossover_hz=None, phase_margin_deg=50, gain_margin_db=8)
    assert Targets.from_dict(t.to_dict()) == t
    assert synthesize  # imported for the search tests in test_synthesis_search.py
