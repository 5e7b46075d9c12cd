"""The named rules of :mod:`benchfit.loop.sweeprules`, each on its own evidence.

References: python-control 0.10 ``stability_margins`` on the true transfer function
(named at each check); the rules' own thresholds are our own (said where used).
"""

import numpy as np

from benchfit.loop.asymptote import Asymptote
from benchfit.loop.sweeprules import (
    dc_phase_crossing,
    given_count_conflict,
    modulus_gaps,
    phase_gaps,
)


def _asym(n=0, decided=True, phase=-180.0):
    return Asymptote(n=n, decided=decided, plausible=(n,), slope_n=float(n), slope_sigma=0.001,
                     phase_deg=phase, f_lo_hz=1.0, f_hi_hz=10.0)


def test_dc_phase_crossing_needs_no_integrator_and_an_inverting_decided_low_end():
    # a sweep: the decided asymptote's phase, not the first point's (a corner above it
    # still turns the first point by degrees)
    assert dc_phase_crossing(0, -170.0, 5.0, _asym(phase=-179.5))
    assert dc_phase_crossing(0, -170.0, 5.0, _asym(phase=178.0))
    assert not dc_phase_crossing(0, -180.0, 0.0, _asym(phase=-3.0))         # T(0) > 0
    assert not dc_phase_crossing(0, -180.0, 0.0, _asym(decided=False))      # low end unsure
    assert not dc_phase_crossing(1, -180.0, 0.0, _asym(n=1, phase=-270.0))  # T(0) infinite
    # a model: its first point, far below every corner, within 1 deg of 180 deg
    assert dc_phase_crossing(0, -179.5, 0.2, None)
    assert not dc_phase_crossing(0, -178.0, 0.2, None)
    assert not dc_phase_crossing(0, -179.5, 3.0, None)


def test_given_count_conflict_weighs_the_plausible_counts_and_the_slope_above_four():
    decided = Asymptote(n=1, decided=True, plausible=(1,), slope_n=1.0, slope_sigma=0.01,
                        phase_deg=-90.0, f_lo_hz=1.0, f_hi_hz=10.0)
    unsure = Asymptote(n=1, decided=False, plausible=(1, 2), slope_n=1.4, slope_sigma=0.1,
                       phase_deg=-120.0, f_lo_hz=1.0, f_hi_hz=10.0)
    assert [given_count_conflict(decided, n) for n in range(5)] == [True, False, True, True, True]
    assert [given_count_conflict(unsure, n) for n in range(4)] == [True, False, False, True]
    steep = Asymptote(n=4, decided=False, plausible=(4,), slope_n=5.1, slope_sigma=0.1,
                      phase_deg=-90.0, f_lo_hz=1.0, f_hi_hz=10.0)
    assert not given_count_conflict(steep, 5) and given_count_conflict(steep, 7)


def test_phase_gaps_flag_large_steps_above_the_floor_only():
    from benchfit.loop.sweeprules import GAP_FLOOR_DB

    db = np.array([-24.0, -42.0, -70.0, -75.0, -10.0, -11.0])
    step = np.array([176.0, 10.0, 170.0, 20.0, 89.0])
    # 0: a 176° step between -24 and -42 dB; 2: as large but below the floor; 4: under 90°
    assert phase_gaps(db, step).tolist() == [0]
    assert GAP_FLOOR_DB < -40.0


def test_modulus_gaps_take_the_phase_gaps_and_a_hole_beside_the_minimum():
    from benchfit.loop.sweeprules import HOLE_STEP_RATIO

    x = np.log10(np.array([1.0, 1.1, 1.2, 1.3, 5.0, 5.5, 6.0, 6.6]))
    # the sampled minimum at point 4, right after the 1.3-5 hole (step far above the median)
    assert modulus_gaps(x, 4, np.array([], dtype=int)).tolist() == [3]
    # a minimum away from the hole: only the phase gaps count
    assert modulus_gaps(x, 6, np.array([1])).tolist() == [1]
    # an even sweep has no hole
    even = np.linspace(0.0, 1.0, 8)
    assert modulus_gaps(even, 3, np.array([], dtype=int)).tolist() == []
    assert HOLE_STEP_RATIO > 2.0
