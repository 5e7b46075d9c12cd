"""Curve CSV export: columns, units, round trip, header safety."""

import numpy as np
import pytest

from benchfit.errors import InputError
from benchfit.output.curves import Curve, read_curve_csv, write_curve_csv


def test_frequency_curve_columns_match_textbook_single_pole(tmp_path):
    # A single pole 1/(1 + s/wp): |H| = -3.0103 dB and phase -45 deg at the corner
    # (textbook first-order response, e.g. any circuits text's Bode-plot chapter).
    f = np.logspace(1, 5, 41)
    h = 1.0 / (1 + 1j * f / 1e3)
    p = write_curve_csv(Curve("single pole", "freq_hz", f, h), tmp_path / "c.csv")
    lines = p.read_text().splitlines()
    assert lines[0] == "# benchfit curve v1"
    header = lines[4].split(",")
    assert header == ["freq_hz", "re", "im", "magnitude", "mag_db", "phase_deg"]
    data = np.loadtxt(p, delimiter=",", comments="#", skiprows=5)
    i = int(np.argmin(abs(data[:, 0] - 1e3)))
    assert data[i, 0] == pytest.approx(1e3)
    assert data[i, 4] == pytest.approx(-10 * np.log10(2), abs=1e-9)
    assert data[i, 5] == pytest.approx(-45.0, abs=1e-9)


def test_round_trip_time_and_frequency(tmp_path):
    t = np.linspace(0, 1e-3, 101)
    y = 1 - np.exp(-t / 1e-4)
    back = read_curve_csv(write_curve_csv(Curve("step", "time_s", t, y, unit="V"), tmp_path / "s.csv"))
    assert back.name == "step" and back.unit == "V" and not back.is_frequency
    np.testing.assert_allclose(back.y, y, rtol=1e-11, atol=1e-15)
    f = np.logspace(0, 6, 31)
    z = 0.01 + 1j * 2 * np.pi * f * 1e-6
    c = Curve("zout", "freq_hz", f, z, unit="ohm")
    back = read_curve_csv(write_curve_csv(c, tmp_path / "z.csv"))
    np.testing.assert_allclose(back.y, z, rtol=1e-11)
    again = Curve.from_dict(c.to_dict())
    np.testing.assert_array_equal(again.y, c.y)


def test_name_with_newline_cannot_add_rows(tmp_path):
    f = np.array([1.0, 2.0])
    p = write_curve_csv(Curve("evil\n1,2,3,4,5,6", "freq_hz", f, [1, 1]), tmp_path / "e.csv")
    assert len(p.read_text().splitlines()) == 5 + 2


@pytest.mark.parametrize("kw,msg", [
    ({"x_name": "volts"}, "curve axis"),
    ({"x": [2.0, 1.0]}, "strictly increasing"),
    ({"y": [1.0]}, "equal counts"),
])
def test_validation(kw, msg):
    args = {"name": "c", "x_name": "time_s", "x": [1.0, 2.0], "y": [0.0, 1.0]} | kw
    with pytest.raises(InputError, match=msg):
        Curve(**args)


def test_read_rejects_other_files(tmp_path):
    p = tmp_path / "x.csv"
    p.write_text("freq_hz,re,im\n1,2,3\n")
    with pytest.raises(InputError, match="line 1"):
        read_curve_csv(p)
