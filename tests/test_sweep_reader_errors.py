"""Every bad input the issue lists raises InputError naming the file and, where one exists, the line."""

import numpy as np
import pytest

from benchfit.data import read_sweep
from benchfit.errors import InputError

HEADER = "Frequency (Hz),Gain (dB),Phase (deg)\n"


def _file(tmp_path, text, name="bad.csv"):
    p = tmp_path / name
    p.write_bytes(text if isinstance(text, bytes) else text.encode("utf-8"))
    return p


@pytest.mark.parametrize("text,line,match", [
    (HEADER + "10,1,0\n20,abc,0\n30,1,0\n", 3, "non-numeric cell 'abc'"),
    (HEADER + "10,1,0\n20,1,0\n30,1,0\nxyz,1,0\n40,1,0\n", 5, "non-numeric cell 'xyz'"),
    (HEADER + "10,1,0\n20,nan,0\n30,1,0\n", 3, "not finite"),
    (HEADER + "10,1,0\n20,1,inf\n30,1,0\n", 3, "not finite"),
    (HEADER + "0,1,0\n20,1,0\n", 2, "not positive"),
    (HEADER + "10,1,0\n-20,1,0\n", 3, "not positive"),
    (HEADER + "10,1,0\n20,1\n30,1,0\n", 3, "2 cells, expected 3"),
    (HEADER + "10,1,0\n20,1,0,5\n30,1,0\n", 3, "4 cells, expected 3"),
    ("Frequency (Hz),Magnitude (V/V),Phase (deg)\n10,1,0\n20,-1,0\n", 3, "negative"),
    ("! c\n# GHz S XX R 50\n1 0.5 0\n2 0.5 0\n", 2, "unknown option 'XX'"),
    ("# MHz S MA R fifty\n1 0.5 0\n2 0.5 0\n", 1, "not a number"),
    ("# MHz S MA R 50\n1 0.5 0\n2 0.5 zero\n", 3, "non-numeric value 'zero'"),
    ("# MHz S MA R 50\n[Version] 2.0\n1 0.5 0\n", 2, "Touchstone 2"),
])
def test_bad_cell_names_file_and_line(tmp_path, text, line, match):
    p = _file(tmp_path, text, "bad.s1p" if text.startswith(("!", "#")) else "bad.csv")
    with pytest.raises(InputError, match=match) as e:
        read_sweep(p)
    assert e.value.line == line
    assert e.value.source == str(p)
    assert str(p) in str(e.value) and f"line {line}" in str(e.value)


def test_wrong_value_count_in_touchstone(tmp_path):
    p = _file(tmp_path, "# Hz S RI R 50\n1 0.9 0 0.1 0 0.1 0 0.9 0\n2 0.9 0 0.1 0\n", "two.s2p")
    with pytest.raises(InputError, match="5 values, expected 9") as e:
        read_sweep(p)
    assert e.value.line == 3


@pytest.mark.parametrize("text,match", [
    ("", "empty"),
    ("\n  \n\t\n", "empty"),
    ("just some words\nand more words\n", "no numeric rows"),
    (HEADER + "10,1,0\n", "only 1 data point"),
    (HEADER + "10,1,0\n10,2,0\n", "same frequency"),
    ("Alpha,Beta,Gamma\n1,2,3\n4,5,6\n", "no frequency column"),
    ("1,2,3\n4,5,6\n", "no header line above the numbers at line 1"),
])
def test_bad_file_names_the_file(tmp_path, text, match):
    p = _file(tmp_path, text)
    with pytest.raises(InputError, match=match) as e:
        read_sweep(p)
    assert e.value.source == str(p)


def test_missing_folder_and_binary(tmp_path):
    with pytest.raises(InputError, match="file not found"):
        read_sweep(tmp_path / "absent.csv")
    with pytest.raises(InputError, match="is a folder"):
        read_sweep(tmp_path)
    with pytest.raises(InputError, match="binary"):
        read_sweep(_file(tmp_path, b"\x00\x01\x02garbage\x00"))


@pytest.mark.parametrize("kwargs,option", [
    ({"columns": "freq,mag,colour"}, "--columns"),
    ({"columns": "freq,mag"}, "--columns"),
    ({"mag": "decibel"}, "--mag"),
    ({"phase": "grad"}, "--phase"),
    ({"freq_unit": "furlong"}, "--freq-unit"),
    ({"quantity": "voltage"}, "--quantity"),
    ({"trace": 3}, "--trace"),
    ({"columns": "freq,db,deg,re,im"}, None),
])
def test_bad_option_names_the_option(tmp_path, kwargs, option):
    p = _file(tmp_path, HEADER + "10,1,0\n20,1,0\n")
    with pytest.raises(InputError) as e:
        read_sweep(p, **kwargs)
    if option:
        assert e.value.source == option


def test_bad_touchstone_param(tmp_path):
    p = _file(tmp_path, "# Hz S RI R 50\n1 0.9 0 0.1 0 0.1 0 0.9 0\n2 0.9 0 0.1 0 0.1 0 0.9 0\n", "x.s2p")
    with pytest.raises(InputError, match="does not exist"):
        read_sweep(p, param="S31")
    with pytest.raises(InputError, match="holds S parameters"):
        read_sweep(p, param="Z21")
    with pytest.raises(InputError, match="not a parameter name"):
        read_sweep(p, param="gain")
    assert read_sweep(p, param="s12").response[0] == pytest.approx(0.1)


def test_nothing_is_written_on_failure(tmp_path):
    # the reader never writes; convert writes only after a successful read (see test_cli_inspect)
    p = _file(tmp_path, HEADER + "10,1,0\n20,x,0\n")
    before = sorted(tmp_path.iterdir())
    with pytest.raises(InputError):
        read_sweep(p)
    assert sorted(tmp_path.iterdir()) == before


def test_overflowing_db_value(tmp_path):
    p = _file(tmp_path, HEADER + "10,1,0\n20,99999,0\n")
    with pytest.raises(InputError, match="overflows") as e:
        read_sweep(p)
    assert e.value.line == 3
    assert np.isfinite(read_sweep(_file(tmp_path, HEADER + "10,1,0\n20,300,0\n", "ok.csv")).mag_db).all()
