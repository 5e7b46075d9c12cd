"""Bounds that keep a held parameter at the rank its name gives (benchfit.fitting.ordering)."""

import math

import numpy as np

from benchfit.fitting.ordering import rank_bounds
from benchfit.fitting.parameters import Structure


def _zeros3():
    # gain, pair, three real zeros numbered lowest first (docs/fitting.md): -20 kHz (RHP),
    # 60 kHz, 274 kHz
    st = Structure(0, 1, 3, 0, 0, False)
    return st, np.array([30.0, 2e3, 3.0, -2e4, 6e4, 2.74e5])


def test_a_bounded_zero_keeps_the_higher_zeros_above_its_floor():
    st, v = _zeros3()
    assert st.names == ("gain", "pair1_f0_hz", "pair1_q", "zero1_hz", "zero2_hz", "zero3_hz")
    b = rank_bounds(st, v, {"zero2_hz": (7e4, math.inf)})
    assert b["zero2_hz"] == (7e4, math.inf)  # the user's own bound stands
    assert b["zero3_hz"] == (7e4, math.inf)  # a higher zero stays above it
    assert "zero1_hz" not in b  # nothing lower to cap: the range has no top
    assert "pair1_f0_hz" not in b  # another kind


def test_a_ceiling_caps_the_lower_zeros_on_their_own_side_of_zero():
    st, v = _zeros3()
    b = rank_bounds(st, v, {"zero2_hz": (0.0, 1e5)})
    # zero1 starts in the right half-plane (negative): |zero1| <= 100 kHz, still negative
    assert b["zero1_hz"] == (-1e5, 0.0)
    assert "zero3_hz" not in b  # a floor of 0 asks nothing of the higher ones


def test_a_fixed_frequency_orders_the_others_around_it():
    st, v = _zeros3()
    b = rank_bounds(st, v, {}, {"zero2_hz": 5e4})
    assert b["zero3_hz"] == (5e4, math.inf) and b["zero1_hz"] == (-5e4, 0.0)


def test_no_held_frequency_adds_nothing_and_a_broken_start_is_left_alone():
    st, v = _zeros3()
    assert rank_bounds(st, v, {"gain": (1.0, 100.0)}) == {"gain": (1.0, 100.0)}
    # zero3 already starts below the held floor: no bound its start would break
    assert "zero3_hz" not in rank_bounds(st, v, {"zero2_hz": (3e5, math.inf)})


def test_a_bound_points_at_the_middle_of_its_range():
    from benchfit.fitting.groups import bound_target

    assert bound_target(300e3, 400e3) == np.sqrt(300e3 * 400e3)
    assert bound_target(7e4, math.inf) == 7e4 and bound_target(-math.inf, 250.0) == 250.0
    assert bound_target(-3e4, -1e4) == np.sqrt(3e8)  # an RHP range: its magnitudes
    assert bound_target(0.0, math.inf) is None  # a sign only: no place to point at
