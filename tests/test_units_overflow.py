"""benchfit.data.units.freq_to_hz: unit conversion that refuses to overflow.

The factors are the SI prefixes (k = 1e3, M = 1e6, G = 1e9; SI Brochure, BIPM,
9th edition, table 7).
"""

import warnings

import numpy as np
import pytest

from benchfit.data import read_sweep
from benchfit.data.units import freq_to_hz
from benchfit.errors import InputError


def test_converts_with_the_si_prefix():
    with warnings.catch_warnings():
        warnings.simplefilter("error", RuntimeWarning)
        hz = freq_to_hz(np.array([1.5, 2.0]), "GHz", source="f", lines=[3, 4])
        np.testing.assert_array_equal(hz, [1.5e9, 2e9])
        np.testing.assert_array_equal(freq_to_hz([7.0], "mHz", source="f", lines=[1]), [7e-3])
        np.testing.assert_array_equal(freq_to_hz([1e299], "GHz", source="f", lines=[1]), [1e308])


def test_overflow_names_file_line_and_column():
    with warnings.catch_warnings():
        warnings.simplefilter("error", RuntimeWarning)
        with pytest.raises(InputError) as e:
            freq_to_hz(np.array([1.0, 1e300, 2e300]), "GHz", source="a.csv", lines=[2, 3, 4],
                       column="Frequency (GHz)")
    assert (e.value.source, e.value.line, e.value.column) == ("a.csv", 3, "Frequency (GHz)")
    assert "frequency 1e+300 GHz is too large to represent in Hz" in str(e.value)


def test_csv_sweep_with_an_overflowing_frequency(tmp_path):
    p = tmp_path / "huge.csv"
    p.write_text("Frequency (GHz),Gain (dB),Phase (deg)\n1,0,0\n1e300,0,0\n2e300,0,0\n")
    with warnings.catch_warnings():
        warnings.simplefilter("error", RuntimeWarning)
        with pytest.raises(InputError) as e:
            read_sweep(p)
    assert e.value.line == 3
