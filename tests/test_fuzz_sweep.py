"""Fuzzing the sweep readers (text-table dialects, Touchstone v1, canonical CSV) with hypothesis.

Valid Touchstone and canonical files round-trip (text-table dialects: tests/test_sweep_reader_properties.py); damaged files (tests/fuzz_mutate.py)
give either a correct sweep or benchfit's own error naming the file, never another
exception.  A few hundred examples run in the normal suite; `make fuzz` runs
10 000 per test (profile in tests/conftest.py).

The Touchstone writer below follows the Touchstone File Format Specification
version 1.1 (EIA/IBIS Open Forum, 2002): option line '# <unit> <param> <format> R <n>',
frequency then values, two-port data in the order N11 N21 N12 N22, other port
counts row by row with at most four pairs per line.
"""

import numpy as np
import pytest
from dialect_text import FORMS, write_dialect
from fuzz_mutate import MAX_MESSAGE, expect_own_error, mutation
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from benchfit.data import FrequencyResponse, read_sweep, write_sweep_csv


def damage(data: bytes):
    """The damages of tests/fuzz_mutate.py, with the shapes of issue 21."""
    return mutation(data, issue21=True)


# A reader must answer damaged input with a result or an InputError, never with numpy
# RuntimeWarnings printed on the user's terminal.
pytestmark = pytest.mark.filterwarnings("error::RuntimeWarning")

NORMAL = settings(max_examples=150, deadline=None,
                  suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])
FUZZ = settings(deadline=None,
                suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow,
                                       HealthCheck.data_too_large])


# ----- generators of valid files ---------------------------------------------------------
@st.composite
def responses(draw, n_min=2, n_max=30):
    n = draw(st.integers(n_min, n_max))
    f0 = draw(st.floats(1e-2, 1e6))
    ratio = draw(st.floats(1.01, 2.0))
    mags = np.asarray(draw(st.lists(st.floats(1e-5, 1e5), min_size=n, max_size=n)))
    ph = np.asarray(draw(st.lists(st.floats(-3.1, 3.1), min_size=n, max_size=n)))
    return f0 * ratio ** np.arange(n), mags * np.exp(1j * ph)


@st.composite
def table_files(draw):
    """(bytes, Written) of a sweep in a random text dialect (tests/dialect_text.py)."""
    f, h = draw(responses())
    sep = draw(st.sampled_from([",", ";", "\t", " ", "  "]))
    dialect = dict(sep=sep, decimal="." if sep == "," else draw(st.sampled_from([".", ","])),
                   header=draw(st.sampled_from(["paren", "bracket", "underscore", "unit_row", "none"])),
                   freq_unit=draw(st.sampled_from(["Hz", "kHz", "MHz"])),
                   form=draw(st.sampled_from(sorted(FORMS))), comments=draw(st.booleans()),
                   crlf=draw(st.booleans()), bom=draw(st.booleans()),
                   descending=draw(st.booleans()), metadata=draw(st.booleans()))
    return write_dialect(f, h, **dialect)


_TS_UNIT = {"Hz": 1.0, "kHz": 1e3, "MHz": 1e6, "GHz": 1e9}


@st.composite
def touchstone_files(draw):
    """(bytes, ports, freq_hz, matrix values (n, p, p), param letter, R) of a Touchstone v1 file."""
    ports = draw(st.integers(1, 4))
    f, _ = draw(responses(n_max=12))
    n = f.size
    rng = np.random.default_rng(draw(st.integers(0, 2**32 - 1)))  # values need no shrinking
    vals = (10 ** rng.uniform(-3, 3, (n, ports, ports))
            * np.exp(1j * rng.uniform(-np.pi, np.pi, (n, ports, ports))))
    unit = draw(st.sampled_from(sorted(_TS_UNIT)))
    fmt = draw(st.sampled_from(["RI", "MA", "DB"]))
    letter = draw(st.sampled_from(["S", "Z", "Y"]))
    r = draw(st.sampled_from([50.0, 75.0, 1.0]))
    lines = ["! written by the fuzz test", f"# {unit} {letter} {fmt} R {r:g}"]
    printed = np.empty_like(vals)
    for i in range(n):
        order = ([(0, 0), (1, 0), (0, 1), (1, 1)] if ports == 2 else
                 [(a, b) for a in range(ports) for b in range(ports)])
        cells = []
        for a, b in order:
            v = vals[i, a, b]
            if fmt == "RI":
                x, y = f"{v.real:.9e}", f"{v.imag:.9e}"
                printed[i, a, b] = float(x) + 1j * float(y)
            else:
                m = f"{abs(v):.9e}" if fmt == "MA" else f"{20 * np.log10(abs(v)):.9f}"
                d = f"{np.degrees(np.angle(v)):.9f}"
                mag = float(m) if fmt == "MA" else 10 ** (float(m) / 20)
                printed[i, a, b] = mag * np.exp(1j * np.radians(float(d)))
                x, y = m, d
            cells.append(f"{x} {y}")
        fcell = f"{f[i] / _TS_UNIT[unit]:.12g}"
        f[i] = float(fcell) * _TS_UNIT[unit]
        if ports <= 2:
            lines.append(" ".join([fcell, *cells]))
        else:  # at most four pairs per line, each matrix row on its own line(s)
            for row in range(ports):
                rc = cells[row * ports:(row + 1) * ports]
                for k in range(0, ports, 4):
                    lead = fcell if (row == 0 and k == 0) else " "
                    lines.append(" ".join([lead, *rc[k:k + 4]]))
    return ("\n".join(lines) + "\n").encode("ascii"), ports, f, printed, letter, r


# ----- checks ------------------------------------------------------------------------------
def _is_sane(r: FrequencyResponse) -> None:
    """What every sweep benchfit returns must satisfy."""
    assert isinstance(r, FrequencyResponse)
    assert len(r) >= 2
    assert np.all(np.isfinite(r.freq_hz)) and np.all(r.freq_hz > 0)
    assert np.all(np.diff(r.freq_hz) > 0)
    assert np.all(np.isfinite(r.response))


def _read_touchstone(path, case):
    data, ports, f, printed, letter, r_ohm = case
    param = f"{letter}{ports}1"
    r = read_sweep(path, param=param)
    want = printed[:, ports - 1, 0]
    if letter == "Z":  # normalised to R in the file; benchfit gives ohms
        want = want * r_ohm
    elif letter == "Y":
        want = want / r_ohm
    np.testing.assert_allclose(r.freq_hz, f, rtol=1e-11)
    np.testing.assert_allclose(r.response, want, rtol=1e-7, atol=1e-12)


def _damaged(path, data, **options):
    path.write_bytes(data)
    r = expect_own_error(lambda: read_sweep(path, **options), names=path.name, size=len(data),
                         max_message=MAX_MESSAGE)
    if r is not None:
        _is_sane(r)


# ----- normal suite ----------------------------------------------------------------------
# Text-table dialect round trips: tests/test_sweep_reader_properties.py (normal and fuzz).


@NORMAL
@given(case=touchstone_files())
def test_touchstone_round_trips(tmp_path_factory, case):
    p = tmp_path_factory.mktemp("ts") / f"net.s{case[1]}p"
    p.write_bytes(case[0])
    _read_touchstone(p, case)


@settings(NORMAL, max_examples=60)
@given(resp=responses())
def test_canonical_csv_round_trips(tmp_path_factory, resp):
    f, h = resp
    p = tmp_path_factory.mktemp("c") / "canon.csv"
    write_sweep_csv(FrequencyResponse(freq_hz=f, response=h, quantity="plant"), p)
    r = read_sweep(p)
    # canonical CSV prints 13 significant digits ('%.12e')
    np.testing.assert_allclose(r.freq_hz, f, rtol=1e-12)
    np.testing.assert_allclose(r.response, h, rtol=1e-11)
    assert r.quantity == "plant"


@NORMAL
@given(data=st.data(), w=table_files())
def test_damaged_tables(tmp_path_factory, data, w):
    _damaged(tmp_path_factory.mktemp("d") / "sweep.csv", data.draw(damage(w.data)), **w.options)


@NORMAL
@given(data=st.data(), case=touchstone_files())
def test_damaged_touchstone(tmp_path_factory, data, case):
    _damaged(tmp_path_factory.mktemp("d") / f"net.s{case[1]}p", data.draw(damage(case[0])))


@NORMAL
@given(data=st.data(), resp=responses())
def test_damaged_canonical_csv(tmp_path_factory, data, resp):
    p = tmp_path_factory.mktemp("d") / "canon.csv"
    write_sweep_csv(FrequencyResponse(freq_hz=resp[0], response=resp[1]), p)
    _damaged(p, data.draw(damage(p.read_bytes())))


# ----- `make fuzz` --------------------------------------------------------------------------
@pytest.mark.fuzz
@FUZZ
@given(case=touchstone_files())
def test_touchstone_round_trips_fuzz(tmp_path_factory, case):
    test_touchstone_round_trips.hypothesis.inner_test(tmp_path_factory, case)


@pytest.mark.fuzz
@FUZZ
@given(data=st.data(), w=table_files())
def test_damaged_tables_fuzz(tmp_path_factory, data, w):
    _damaged(tmp_path_factory.mktemp("d") / "sweep.csv", data.draw(damage(w.data)), **w.options)


@pytest.mark.fuzz
@FUZZ
@given(data=st.data(), case=touchstone_files())
def test_damaged_touchstone_fuzz(tmp_path_factory, data, case):
    _damaged(tmp_path_factory.mktemp("d") / f"net.s{case[1]}p", data.draw(damage(case[0])))


@pytest.mark.fuzz
@FUZZ
@given(data=st.data(), resp=responses())
def test_damaged_canonical_csv_fuzz(tmp_path_factory, data, resp):
    test_damaged_canonical_csv.hypothesis.inner_test(tmp_path_factory, data, resp)
