"""Property tests: random dialect choices recover the same response (hypothesis).

A known response is written with a random separator, decimal mark, frequency
unit, header style, data form (dB/linear magnitude, degree/radian phase,
re/im), comments, metadata, line ends, BOM and sweep direction; the reader,
told nothing but what a headerless file needs, must give back the printed values.
"""

import numpy as np
import pytest
from dialect_text import FORMS, write_dialect
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from benchfit.data import read_sweep
from benchfit.errors import InputError

# A reader must answer damaged input with a result or an InputError, never with numpy
# RuntimeWarnings printed on the user's terminal.
pytestmark = pytest.mark.filterwarnings("error::RuntimeWarning")

SEPS = [",", ";", "\t", " ", "  "]


@st.composite
def dialects(draw):
    sep = draw(st.sampled_from(SEPS))
    decimal = "." if sep == "," else draw(st.sampled_from([".", ","]))
    return dict(
        sep=sep, decimal=decimal,
        header=draw(st.sampled_from(["paren", "bracket", "underscore", "unit_row", "none"])),
        freq_unit=draw(st.sampled_from(["Hz", "kHz", "MHz"])),
        form=draw(st.sampled_from(sorted(FORMS))),
        comments=draw(st.booleans()), crlf=draw(st.booleans()), bom=draw(st.booleans()),
        descending=draw(st.booleans()), metadata=draw(st.booleans()),
    )


@st.composite
def sweeps(draw):
    n = draw(st.integers(min_value=2, max_value=40))
    f0 = draw(st.floats(min_value=0.1, max_value=1e5))
    ratio = draw(st.floats(min_value=1.01, max_value=1.5))
    f = f0 * ratio ** np.arange(n)
    mags = draw(st.lists(st.floats(min_value=1e-4, max_value=1e4), min_size=n, max_size=n))
    phases = draw(st.lists(st.floats(min_value=-3.14, max_value=3.14), min_size=n, max_size=n))
    return f, np.asarray(mags) * np.exp(1j * np.asarray(phases))


def _round_trip(tmp_path_factory, sweep, dialect):
    f, h = sweep
    w = write_dialect(f, h, **dialect)
    p = tmp_path_factory.mktemp("prop") / "sweep.txt"
    p.write_bytes(w.data)
    r = read_sweep(p, **w.options)
    np.testing.assert_allclose(r.freq_hz, w.freq_hz, rtol=1e-12)
    np.testing.assert_allclose(r.response, w.response, rtol=1e-9, atol=1e-12)
    d = r.meta["dialect"]
    assert d["decimal"] == dialect["decimal"]
    assert d["freq_unit"] == dialect["freq_unit"]


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(sweep=sweeps(), dialect=dialects())
def test_any_dialect_round_trips(tmp_path_factory, sweep, dialect):
    _round_trip(tmp_path_factory, sweep, dialect)


@pytest.mark.fuzz
@settings(suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow],
          deadline=None)
@given(sweep=sweeps(), dialect=dialects())
def test_any_dialect_round_trips_fuzz(tmp_path_factory, sweep, dialect):
    _round_trip(tmp_path_factory, sweep, dialect)


@pytest.mark.fuzz
@settings(suppress_health_check=[HealthCheck.function_scoped_fixture], deadline=None)
@given(data=st.binary(max_size=400) | st.text(max_size=400))
def test_garbage_gives_input_error_or_a_sweep(tmp_path_factory, data):
    # whatever the bytes, the reader either reads a sweep or raises InputError (never a crash)
    p = tmp_path_factory.mktemp("junk") / "junk.csv"
    p.write_bytes(data if isinstance(data, bytes) else data.encode("utf-8"))
    try:
        r = read_sweep(p)
    except InputError:
        return
    assert len(r) >= 2 and np.all(np.diff(r.freq_hz) > 0)
