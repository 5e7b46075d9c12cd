"""Each pass/fail rule of benchfit.loop.passrules on its own (rules of our own, stated in
docs/design.md: a target is met or not; every crossing counts unless the caller says)."""

import math

import numpy as np
import pytest

from benchfit.errors import InputError
from benchfit.loop.marginsresult import Margins
from benchfit.loop.passrules import (
    RESOLUTION,
    check_crossings,
    crossing_counts,
    draws_pass,
    margins_meet,
    meets_gain_margin,
    meets_phase_margin,
    shortfalls,
)
from benchfit.loop.synthesis import Targets

T = Targets(None, 45.0, 6.0)


def test_phase_margin_rule_is_signed_and_exact():
    got = meets_phase_margin([45.0, 45.0 - 1e-6, 44.99, -50.0, 120.0, math.inf, math.nan], 45.0)
    assert list(got) == [True, False, False, False, True, True, False]
    assert bool(meets_phase_margin(45.0 - RESOLUTION / 2, 45.0))   # arithmetic, not a shortfall


def test_gain_margin_rule_counts_the_distance_from_0_db_either_way():
    got = meets_gain_margin([6.0, 5.99, -6.5, -3.0, math.inf, math.nan], 6.0)
    assert list(got) == [True, False, True, False, True, False]


def test_crossing_counts_all_main_and_band():
    f = np.array([10.0, 100.0, 1000.0])
    main = np.array([False, True, False])
    assert list(crossing_counts(f, main, "all")) == [True, True, True]
    assert list(crossing_counts(f, main, "main")) == [False, True, False]
    assert list(crossing_counts(f, main, (50.0, 2000.0))) == [False, True, True]
    assert check_crossings([1e3, 2e3]) == (1e3, 2e3)
    for bad in ("some", (2e3, 1e3), ("a", "b"), 5):
        with pytest.raises(InputError):
            check_crossings(bad)


def _margins(gains, phases, stable=True, main_i=0):
    crossings = [{"kind": "gain", "freq_hz": f, "value": v, "direction": "down",
                  "main": i == main_i} for i, (f, v) in enumerate(gains)]
    crossings += [{"kind": "phase", "freq_hz": f, "value": v, "direction": "down"}
                  for f, v in phases]
    pos = [p for p in phases if p[1] > 0]
    gm = min(pos, key=lambda p: p[1]) if pos else (math.nan, math.inf)
    return Margins(phase_margin_deg=gains[main_i][1] if gains else math.inf,
                   crossover_hz=gains[main_i][0] if gains else math.nan,
                   gain_margin_db=gm[1], phase_crossover_hz=gm[0], delay_margin_s=1.0,
                   modulus_margin=0.5, modulus_freq_hz=1.0, peak_sensitivity=2.0,
                   crossings=tuple(crossings), closed_loop_stable=stable,
                   verdict="stable" if stable else "unstable")


def test_margins_meet_judges_every_crossing_unless_told():
    ok = _margins([(100.0, 60.0)], [(1e3, 10.0)])
    assert margins_meet(ok, T) and not shortfalls(ok, T)
    second = _margins([(100.0, 60.0), (2e3, -40.0)], [(1e3, 10.0)])
    assert not margins_meet(second, T)
    assert shortfalls(second, T)[0]["freq_hz"] == 2e3
    assert margins_meet(second, T, "main")
    assert margins_meet(second, T, (10.0, 500.0))
    reduction = _margins([(100.0, 60.0)], [(20.0, -4.0), (1e3, 10.0)])
    assert not margins_meet(reduction, T) and margins_meet(reduction, T, "main")
    assert not margins_meet(_margins([(100.0, 60.0)], [], stable=False), T)


def test_draws_pass_is_the_same_rule_row_by_row():
    # three draws: fine; a second gain crossing below target; a phase crossing too close
    stable = np.array([True, True, True, False])
    pm_main = np.array([60.0, 60.0, 60.0, 60.0])
    gm_min = np.array([10.0, 10.0, 10.0, 10.0])
    gains = (np.array([0, 1, 1, 2, 3]), np.array([100.0, 100.0, 2e3, 100.0, 100.0]),
             np.array([60.0, 60.0, -40.0, 60.0, 60.0]))
    phases = (np.array([0, 1, 2, 2, 3]), np.array([1e3, 1e3, 1e3, 20.0, 1e3]),
              np.array([10.0, 10.0, 10.0, -4.0, 10.0]))
    assert list(draws_pass(stable, pm_main, gm_min, gains, phases, T)) == [True, False, False,
                                                                          False]
    assert list(draws_pass(stable, pm_main, gm_min, gains, phases, T, "main")) == [True, True,
                                                                                  True, False]
    # a band that misses the crossover (NaN) fails under every rule
    assert not draws_pass(np.array([True]), np.array([math.nan]), np.array([10.0]),
                          (np.zeros(0, int), np.zeros(0), np.zeros(0)),
                          (np.zeros(0, int), np.zeros(0), np.zeros(0)), T, (1.0, 10.0))[0]
