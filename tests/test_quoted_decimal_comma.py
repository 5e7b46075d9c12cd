"""A comma-separated file whose quoted cells carry a decimal comma, and the sniffer's error line.

Reference: RFC 4180 quoting (a quoted field may hold the separator), as Python's ``csv``
module writes it (``csv.QUOTE_ALL``): the values written are the values read back.
"""

import csv
import io

import numpy as np
import pytest

from benchfit.data import read_sweep
from benchfit.errors import InputError


def quoted_comma_file(path, f, db, deg):
    buf = io.StringIO()
    w = csv.writer(buf, quoting=csv.QUOTE_ALL, lineterminator="\n")
    w.writerow(["Frequency (Hz)", "Gain (dB)", "Phase (deg)"])
    for row in zip(f, db, deg, strict=True):
        w.writerow([f"{x:.6g}".replace(".", ",") for x in row])
    path.write_text(buf.getvalue(), encoding="utf-8")


def test_quoted_decimal_comma_cells_are_read(tmp_path):
    f = np.logspace(1, 5, 41)
    db = 40 - 10 * np.log10(1 + (f / 1e3) ** 2)
    deg = -np.degrees(np.arctan(f / 1e3))
    p = tmp_path / "q.csv"
    quoted_comma_file(p, f, db, deg)
    assert '"12,5893","39,9993"' in p.read_text()
    for kw in ({}, {"columns": "freq,db,deg"}):
        r = read_sweep(p, **kw)
        assert r.meta["dialect"]["separator"] == "comma" and r.meta["dialect"]["decimal"] == ","
        np.testing.assert_allclose(r.freq_hz, f, rtol=1e-5)
        np.testing.assert_allclose(20 * np.log10(np.abs(r.response)), db, atol=1e-4)
        np.testing.assert_allclose(r.phase_deg, deg, atol=1e-3)


def test_unquoted_comma_file_keeps_the_decimal_point(tmp_path):
    p = tmp_path / "u.csv"
    p.write_text("Frequency (Hz),Gain (dB),Phase (deg)\n10,1.5,-3\n20,1.25,-6\n100,0.5,-20\n")
    r = read_sweep(p)
    assert r.meta["dialect"]["decimal"] == "."
    np.testing.assert_allclose(r.freq_hz, [10, 20, 100])


def test_unsplittable_rows_name_the_file_and_the_first_failing_line(tmp_path):
    p = tmp_path / "units.csv"
    p.write_text("# export\nFrequency,Gain,Phase\n10 Hz,39.9 dB,-0.6 deg\n20 Hz,39.8 dB,-1.2 deg\n")
    with pytest.raises(InputError) as e:
        read_sweep(p)
    assert e.value.source == str(p) and e.value.line == 3
    assert "10 Hz,39.9 dB,-0.6 deg" in str(e.value) and "line 3" in str(e.value)
