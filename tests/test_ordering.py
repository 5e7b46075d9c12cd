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


def test_a_range_across_zero_holds_its_group_on_the_side_it_starts():
    st, v = _zeros3()
    # zero2 starts at +60 kHz: ":50k" keeps it in (0, 50 kHz], not anywhere below 50 kHz
    b = rank_bounds(st, v, {"zero2_hz": (-math.inf, 5e4)})
    assert b["zero2_hz"] == (0.0, 5e4)
    assert b["zero1_hz"] == (-5e4, 0.0)  # the lower one (RHP) keeps |f| <= 50 kHz


def test_a_moved_name_is_reported_only_when_the_users_bound_no_longer_holds_under_it():
    from benchfit.fitting.assemble import held_names_moved

    st = Structure(0, 2, 0, 0, 0, False)
    # the lower pair now under pair1 sits at its bound: the user's name means what they asked
    v = np.array([10.0, 6e3, 1.7, 5.2e5, 0.5])
    moved = {"pair1_f0_hz": "pair2_f0_hz", "pair1_q": "pair2_q",
             "pair2_f0_hz": "pair1_f0_hz", "pair2_q": "pair1_q"}
    assert held_names_moved(st, v, moved, {}, {"pair1_f0_hz": (6e3, math.inf)}) == []
    # a bound the value now under the name breaks, or a fixed value: the move is said
    assert held_names_moved(st, v, moved, {}, {"pair1_f0_hz": (1e4, math.inf)}) == ["pair1_f0_hz"]
    assert held_names_moved(st, v, moved, {"pair1_f0_hz": 5.2e5}, {}) == ["pair1_f0_hz"]


def test_a_ceiling_on_the_lowest_zero_is_honoured_under_its_name():
    # The shipped buck sweep (sample_data/generate.py: ESR zero 80 kHz, pair 5 kHz, 150 ns
    # delay).  A ceiling ':50k' below the true zero: zero1 must end at or under 50 kHz,
    # flagged at bound.  Before the side was held, zero1 escaped to a right-half-plane zero
    # at -19 MHz (which is "below 50 kHz" too) and the renumbering gave its name to 80 kHz.
    import warnings
    from pathlib import Path

    import benchfit
    from benchfit.fitting import fit

    resp = benchfit.read_sweep(Path(__file__).parents[1] / "sample_data" / "buck_plant.csv")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = fit(resp, bounds={"zero1_hz": (-math.inf, 5e4)})
    z1 = res.parameter("zero1_hz")
    assert 0 < z1.value <= 5e4 * (1 + 1e-9) and z1.at_bound
    assert not any("is now" in n for n in res.notes)
