"""E-series tables and snapping.

Reference: IEC 60063:2015 "Preferred number series for resistors and
capacitors"; the values are checked against the `eseries` package (a
general-purpose reference library that embeds the same standard).
"""

import math

import eseries
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from benchfit.errors import InputError
from benchfit.loop.eseries import SERIES, series_values, snap, tolerance


@pytest.mark.parametrize("name", SERIES)
def test_tables_equal_reference_library(name):
    # reference: eseries package, series(E..) gives integers of 2 or 3 digits for one decade
    ref = np.array(eseries.series(getattr(eseries, name)), dtype=float)
    ref = ref / 10 ** math.floor(math.log10(ref[0]))
    ours = series_values(name)
    assert len(ours) == int(name[1:])
    np.testing.assert_allclose(ours, ref, rtol=0, atol=1e-12)


@pytest.mark.parametrize("name", SERIES)
def test_tolerance_matches_reference(name):
    # IEC 60063 tolerances (E6 20 %, E12 10 %, E24 5 %, E48 2 %, E96 1 %, E192 0.5 %),
    # checked against the eseries package's table.
    assert tolerance(name) == pytest.approx(eseries.tolerance(getattr(eseries, name)))


def test_e24_historical_values_are_kept():
    # IEC 60063: these E24 values do not follow round(10**(i/24), 1).
    e24 = series_values("E24")
    formula = np.round(10 ** (np.arange(24) / 24), 1)
    differ = sorted(set(np.round(e24[e24 != formula], 1)))
    assert differ == [2.7, 3.0, 3.3, 3.6, 3.9, 4.3, 4.7, 8.2]


def test_names_are_forgiving_and_bad_names_fail():
    assert series_values("e12")[1] == 1.2
    assert series_values(96)[1] == 1.02
    with pytest.raises(InputError, match="E-series"):
        series_values("E7")


def test_snap_examples():
    # worked by hand: 4.5k lies between 4.3k and 4.7k in E24; log midpoint is sqrt(4.3*4.7)=4.4956
    np.testing.assert_allclose(snap([4.5e3, 4.49e3, 9.6e-9, 0.97], "E24"), [4.7e3, 4.3e3, 1.0e-8, 1.0])
    assert snap(1.2e-12, "E6") == pytest.approx(1.0e-12)
    with pytest.raises(InputError):
        snap([1.0, -2.0], "E24")


@settings(max_examples=300, deadline=None)
@given(st.floats(min_value=-13, max_value=8), st.sampled_from(SERIES))
def test_snap_is_log_nearest(exponent, name):
    # definition of log-nearest: no series value (in this decade or the neighbours)
    # has a smaller |log(v/x)| than the snapped one.
    x = 10.0 ** exponent
    got = float(snap(x, name))
    d = math.floor(exponent)
    cands = np.concatenate([series_values(name) * 10.0 ** k for k in (d - 1, d, d + 1)])
    best = np.min(np.abs(np.log(cands / x)))
    assert abs(math.log(got / x)) <= best + 1e-9
    # and the result is itself a series value
    assert np.any(np.isclose(cands, got, rtol=1e-9))


@given(st.floats(min_value=1e-12, max_value=1e9))
def test_snap_of_a_series_value_is_itself(x):
    once = snap(x, "E96")
    np.testing.assert_allclose(snap(once, "E96"), once, rtol=1e-12)
