"""Fuzzing the scope-trace readers (text exports in any dialect, canonical trace CSV).

Valid exports round-trip (tests/test_trace_reader_properties.py covers the
dialects in the normal suite; the canonical file here); damaged files
(tests/fuzz_mutate.py) give either a sane trace or benchfit's own error naming
the file, never another exception.
"""

import numpy as np
import pytest
from fuzz_mutate import MAX_MESSAGE, expect_own_error, mutation
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from benchfit.data import TimeTrace, read_trace, write_trace_csv


def damage(data: bytes):
    """The damages of tests/fuzz_mutate.py, with the shapes of issue 21."""
    return mutation(data, issue21=True)


# A reader must answer damaged input with a result or an InputError, never with numpy
# RuntimeWarnings printed on the user's terminal.
pytestmark = pytest.mark.filterwarnings("error::RuntimeWarning")

NORMAL = settings(max_examples=150, deadline=None,
                  suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])
FUZZ = settings(deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture,
                                                      HealthCheck.too_slow, HealthCheck.data_too_large])


@st.composite
def exports(draw):
    """Bytes of a scope export in a random dialect: time column or sample-interval line."""
    sep = draw(st.sampled_from([",", ";", "\t", " "]))
    dec = "." if sep == "," else draw(st.sampled_from([".", ","]))
    n = draw(st.integers(2, 40))
    nch = draw(st.integers(1, 3))
    rng = np.random.default_rng(draw(st.integers(0, 2**32 - 1)))
    vals = rng.normal(0, 2, (n, nch))
    dt = draw(st.sampled_from([1e-9, 1e-6, 2e-4]))
    pre = draw(st.integers(0, n - 1))

    def num(x):
        s = f"{x:.6e}"
        return s.replace(".", ",") if dec == "," else s

    lines = []
    names = [f"CH{i + 1}" + (" (mV)" if sep != " " and i == 1 else "") for i in range(nch)]
    if draw(st.booleans()):
        names = ["Time (s)" if sep != " " else "time_s", *names]
        rows = [[num((k - pre) * dt), *map(num, vals[k])] for k in range(n)]
    else:
        kv = ":" if sep == " " else sep
        lines += [f"Sample interval{kv}{num(dt)}", f"Trigger point{kv}{pre}"]
        rows = [list(map(num, vals[k])) for k in range(n)]
    lines.append(sep.join(names))
    lines += [sep.join(r) for r in rows]
    crlf = draw(st.booleans())
    return ("\r\n" if crlf else "\n").join(lines).encode() + b"\n"


def _is_sane(tr: TimeTrace) -> None:
    assert isinstance(tr, TimeTrace)
    assert tr.time_s.size >= 2 and np.all(np.isfinite(tr.time_s))
    assert np.all(np.diff(tr.time_s) > 0)
    assert tr.names and all(tr.channel(i).shape == tr.time_s.shape for i in range(len(tr.names)))


def _damaged(path, data):
    path.write_bytes(data)
    tr = expect_own_error(lambda: read_trace(path), names=path.name, size=len(data),
                          max_message=MAX_MESSAGE)
    if tr is not None:
        _is_sane(tr)


@settings(NORMAL, max_examples=60)
@given(n=st.integers(2, 50), nch=st.integers(1, 4), seed=st.integers(0, 2**32 - 1))
def test_canonical_trace_round_trips(tmp_path_factory, n, nch, seed):
    rng = np.random.default_rng(seed)
    t = np.cumsum(rng.uniform(1e-9, 1e-3, n)) - 1e-3
    ch = {f"ch{i}": rng.normal(0, 5, n) for i in range(nch)}
    p = tmp_path_factory.mktemp("c") / "trace.csv"
    write_trace_csv(TimeTrace(time_s=t, channels=ch), p)
    tr = read_trace(p)
    # canonical CSV prints 13 significant digits ('%.12e')
    np.testing.assert_allclose(tr.time_s, t, rtol=1e-12, atol=1e-15)
    for i, name in enumerate(ch):
        np.testing.assert_allclose(tr.channel(i), ch[name], rtol=1e-11)


@NORMAL
@given(data=st.data(), text=exports())
def test_damaged_exports(tmp_path_factory, data, text):
    _damaged(tmp_path_factory.mktemp("d") / "scope.csv", data.draw(damage(text)))


@NORMAL
@given(data=st.data(), n=st.integers(2, 30))
def test_damaged_canonical_trace(tmp_path_factory, data, n):
    p = tmp_path_factory.mktemp("d") / "trace.csv"
    t = np.arange(n) * 1e-6
    write_trace_csv(TimeTrace(time_s=t, channels={"out": np.sin(t * 1e5)}), p)
    _damaged(p, data.draw(damage(p.read_bytes())))


@pytest.mark.fuzz
@FUZZ
@given(data=st.data(), text=exports())
def test_damaged_exports_fuzz(tmp_path_factory, data, text):
    _damaged(tmp_path_factory.mktemp("d") / "scope.csv", data.draw(damage(text)))


@pytest.mark.fuzz
@FUZZ
@given(data=st.data(), n=st.integers(2, 30))
def test_damaged_canonical_trace_fuzz(tmp_path_factory, data, n):
    test_damaged_canonical_trace.hypothesis.inner_test(tmp_path_factory, data, n)
