"""Property tests for the scope-trace reader: random export dialects give back the samples."""

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from benchfit.data import read_trace
from benchfit.errors import InputError

# A reader must answer damaged input with a result or an InputError, never with numpy
# RuntimeWarnings printed on the user's terminal.
pytestmark = pytest.mark.filterwarnings("error::RuntimeWarning")

TIME_UNITS = {"s": 1.0, "ms": 1e3, "us": 1e6, "ns": 1e9}
SIG_UNITS = {"V": 1.0, "mV": 1e3}


@st.composite
def exports(draw):
    sep = draw(st.sampled_from([",", ";", "\t", " "]))
    decimal = "." if sep == "," else draw(st.sampled_from([".", ","]))
    n = draw(st.integers(min_value=2, max_value=60))
    dt = draw(st.sampled_from([1e-9, 2e-7, 1e-6, 5e-5, 1e-3]))
    pre = draw(st.integers(min_value=0, max_value=n - 1))
    tunit = draw(st.sampled_from(sorted(TIME_UNITS)))
    nch = draw(st.integers(min_value=1, max_value=3))
    units = [draw(st.sampled_from(sorted(SIG_UNITS))) for _ in range(nch)]
    values = draw(st.lists(st.lists(st.floats(-50, 50), min_size=n, max_size=n), min_size=nch,
                           max_size=nch))
    time_column = draw(st.booleans())
    metadata = draw(st.booleans())
    return dict(sep=sep, decimal=decimal, n=n, dt=dt, pre=pre, tunit=tunit, units=units,
                values=values, time_column=time_column, metadata=metadata)


def _text(e):
    def num(x, fmt):
        s = fmt % x
        return s.replace(".", ",") if e["decimal"] == "," else s

    k = np.arange(e["n"]) - e["pre"]
    t = k * e["dt"]
    lines = ["Scope export (property test)"] if e["metadata"] else []
    names = [f"CH{i + 1} ({u})" if e["sep"] != " " else f"CH{i + 1}_{u}" for i, u in enumerate(e["units"])]
    if e["time_column"]:
        tname = f"Time ({e['tunit']})" if e["sep"] != " " else f"time_{e['tunit']}"
        names = [tname, *names]
    else:
        lines += [f"Sample interval{e['sep'] if e['sep'] != ' ' else ':'}{num(e['dt'], '%.6e')}",
                  f"Trigger point{e['sep'] if e['sep'] != ' ' else ':'}{e['pre']}"]
    lines.append(e["sep"].join(names))
    printed = []
    for j in range(e["n"]):
        cells = [num(t[j] * TIME_UNITS[e["tunit"]], "%.9e")] if e["time_column"] else []
        row = [num(ch[j], "%.6e") for ch in e["values"]]
        printed.append([float(c.replace(",", ".")) for c in row])
        lines.append(e["sep"].join(cells + row))
    return "\n".join(lines) + "\n", t, np.array(printed).T


def _round_trip(tmp_path_factory, e):
    text, t, printed = _text(e)
    p = tmp_path_factory.mktemp("scope") / "trace.csv"
    p.write_text(text, encoding="utf-8")
    tr = read_trace(p)
    np.testing.assert_allclose(tr.time_s, t, rtol=1e-8, atol=e["dt"] * 1e-6)
    assert tr.names == [f"CH{i + 1}" for i in range(len(e["units"]))]
    for i, u in enumerate(e["units"]):
        np.testing.assert_allclose(tr.channel(i), printed[i] / SIG_UNITS[u], rtol=1e-12)


@settings(max_examples=120, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(e=exports())
def test_scope_dialects_round_trip(tmp_path_factory, e):
    _round_trip(tmp_path_factory, e)


@pytest.mark.fuzz
@settings(suppress_health_check=[HealthCheck.function_scoped_fixture], deadline=None)
@given(e=exports())
def test_scope_dialects_round_trip_fuzz(tmp_path_factory, e):
    _round_trip(tmp_path_factory, e)


@pytest.mark.fuzz
@settings(suppress_health_check=[HealthCheck.function_scoped_fixture], deadline=None)
@given(data=st.binary(max_size=400) | st.text(max_size=400))
def test_garbage_gives_input_error_or_a_trace(tmp_path_factory, data):
    p = tmp_path_factory.mktemp("junk") / "junk.csv"
    p.write_bytes(data if isinstance(data, bytes) else data.encode("utf-8"))
    try:
        tr = read_trace(p)
    except InputError:
        return
    assert len(tr) >= 2 and np.all(np.diff(tr.time_s) > 0)
