"""Touchstone files whose numbers are finite but whose scaling is not.

A reference resistance of 0 (or inf, or a subnormal one for Y data), a
frequency of 1e300 GHz, 7000 dB, a Z value times a huge R: the reader must give
either the right values or one InputError naming the file and line, and never
let numpy print a RuntimeWarning (overflow / divide by zero / invalid value).
Every read here runs with RuntimeWarnings turned into errors.

Reference for the cases that must read correctly: scikit-rf's Touchstone
reader (skrf.Network, general-purpose reference library); the format rules
(option line ``# <unit> <param> <format> R <ohms>``, Z normalised to R so
Z = value·R, Y = value/R) are those of the Touchstone File Format
Specification 1.1 (IBIS Open Forum).
"""

import subprocess
import sys
import warnings

import numpy as np
import pytest

from benchfit.data import read_sweep
from benchfit.data.touchstone import read_touchstone
from benchfit.errors import InputError


def read_strict(path, **kw):
    with warnings.catch_warnings():
        warnings.simplefilter("error", RuntimeWarning)
        return read_sweep(path, **kw)


@pytest.mark.parametrize("name,text,fragment,line", [
    # reference resistance that cannot normalise anything
    ("r0.s1p", "# Hz Z RI R 0\n100 1 0\n200 1 0\n", "reference resistance 0 must be a finite number > 0", 1),
    ("rneg.s1p", "# Hz Z RI R -5\n100 1 0\n200 1 0\n", "reference resistance -5 must be", 1),
    ("rinf.s1p", "# Hz Z RI R inf\n100 1 0\n200 1 0\n", "reference resistance inf must be", 1),
    ("rnan.s1p", "# Hz Z RI R nan\n100 1 0\n200 1 0\n", "reference resistance nan must be", 1),
    ("r0s.s1p", "# Hz S MA R 0\n100 1 0\n200 1 0\n", "reference resistance 0 must be", 1),
    # scaling overflows although every number in the file is finite
    ("fhuge.s1p", "# GHz S DB R 50\n1e2 0 0\n1e300 0 0\n", "frequency 1e+300 GHz is too large", 3),
    ("dbhuge.s1p", "! c\n# Hz S DB R 50\n100 0 0\n200 7000 0\n300 0 0\n",
     "S11 magnitude 7000 dB overflows", 4),
    ("zhuge.s1p", "# Hz Z RI R 1e308\n100 0.5 0\n200 10 0\n",
     "Z11 value at 200 Hz times R = 1e+308 ohm overflows", 3),
    ("ysub.s1p", "# Hz Y RI R 1e-310\n100 1 0\n200 1 0\n",
     "Y11 value at 100 Hz divided by R = 1e-310 ohm overflows", 2),
])
def test_overflow_is_one_input_error_naming_file_and_line(tmp_path, name, text, fragment, line):
    p = tmp_path / name
    p.write_text(text)
    with pytest.raises(InputError) as e:
        read_strict(p)
    assert fragment in str(e.value)
    assert e.value.source == str(p) and e.value.line == line


def test_overflow_in_a_wrapped_three_port_names_the_point_s_first_line(tmp_path):
    # 3-port: 19 values a point, wrapped over 3 lines (row-major N11 N12 N13 / N21 ... / N31 ...)
    ok = "1 0 1 0 1 0"
    bad = "1e300 0 1 0 1 0"
    body = (f"100 {ok}\n{ok}\n{ok}\n"
            f"200 {ok}\n{bad}\n{ok}\n")
    p = tmp_path / "three.s3p"
    p.write_text("# Hz Z MA R 1e10\n" + body)
    with pytest.raises(InputError, match="Z21 value at 200 Hz times R") as e:
        read_strict(p, param="Z21")
    assert e.value.line == 5  # the line where the 200 Hz point starts
    # the same file's Z11 is fine: an overflow in a column not read does not matter
    z11 = read_strict(p, param="Z11")
    np.testing.assert_allclose(z11.response, [1e10, 1e10])


def test_noise_rows_do_not_shift_the_line_numbers(tmp_path):
    body = "1 0.1 10 2.0 -20 0.01 5 0.2 -30\n2 0.1 10 7000 -20 0.01 5 0.2 -30\n"
    p = tmp_path / "noisy.s2p"
    p.write_text("# GHz S DB R 50\n" + body + "! noise\n1 1.5 0.3 40 0.5\n")
    with pytest.raises(InputError, match="S21 magnitude 7000 dB") as e:
        read_strict(p)
    assert e.value.line == 3


skrf = pytest.importorskip("skrf")


@pytest.mark.parametrize("name,text,attr", [
    ("ztiny.s1p", "# Hz Z RI R 1e-3\n100 0.5 0.1\n200 0.25 -0.2\n300 2 0\n", "z"),
    ("zbig.s1p", "# Hz Z MA R 1e6\n100 1e3 10\n200 2e3 20\n300 3e3 30\n", "z"),
    ("fbig.s1p", "# GHz S RI R 50\n1e6 0.5 0.1\n2e6 0.25 -0.2\n3e6 0.1 0\n", "s"),
    ("dbbig.s1p", "# Hz S DB R 50\n100 -300 10\n200 0 20\n300 120 30\n", "s"),
])
def test_extreme_but_representable_files_read_like_scikit_rf(tmp_path, name, text, attr):
    p = tmp_path / name
    p.write_text(text)
    ours = read_strict(p)
    ref = skrf.Network(str(p))
    np.testing.assert_allclose(ours.freq_hz, ref.f, rtol=1e-12)
    np.testing.assert_allclose(ours.response, getattr(ref, attr)[:, 0, 0], rtol=1e-9)


def test_y_over_a_small_r_is_the_reciprocal_of_the_same_load_as_z(tmp_path):
    # One port: Y = 1/Z (circuit textbook); v1 stores z = Z/R and y = Y·R, so the
    # file values are reciprocal too.  (Not compared with scikit-rf: its 2.2 reader
    # multiplies v1 Y data by R, reading a matched load y = 1 as nearly a short.)
    z = np.array([0.5 + 0.1j, 0.25 - 0.2j, 2.0])
    f = [100, 200, 300]
    (tmp_path / "z.s1p").write_text("# Hz Z RI R 1e-3\n" + "".join(
        f"{fi} {v.real:.17g} {v.imag:.17g}\n" for fi, v in zip(f, z, strict=True)))
    (tmp_path / "y.s1p").write_text("# Hz Y RI R 1e-3\n" + "".join(
        f"{fi} {v.real:.17g} {v.imag:.17g}\n" for fi, v in zip(f, 1 / z, strict=True)))
    zr, yr = read_strict(tmp_path / "z.s1p"), read_strict(tmp_path / "y.s1p")
    np.testing.assert_allclose(zr.response, z * 1e-3, rtol=1e-12)
    np.testing.assert_allclose(yr.response, 1 / zr.response, rtol=1e-12)


def test_r0_through_read_touchstone_directly():
    with pytest.raises(InputError) as e:
        read_touchstone("# Hz S RI R 0\n1 1 0\n2 1 0\n", "text", ports=1)
    assert e.value.line == 1 and "reference resistance 0" in str(e.value)


@pytest.mark.parametrize("text", ["# GHz S MA R 50\n1 1 0\n1e300 1 0\n",
                                  "# Hz Y RI R 1e-310\n100 1 0\n200 1 0\n"])
def test_inspect_prints_one_error_line_and_no_numpy_warning(tmp_path, text):
    p = tmp_path / "bad.s1p"
    p.write_text(text)
    run = subprocess.run([sys.executable, "-m", "benchfit", "inspect", str(p)],
                         capture_output=True, text=True, timeout=120)
    assert run.returncode == 2
    assert "Warning" not in run.stderr and "Traceback" not in run.stderr
    assert run.stderr.startswith(f"benchfit: error: {p}, line ") and run.stderr.count("\n") == 1
