"""Generated files with rows that cannot be read: no row may go missing unannounced.

The row rule (benchfit/data/rows.py): every row of the data block is read, or the
error names the first row that could not be, or (``skip_bad_rows``) the rows left
out are listed.  Each case here writes a known sweep or scope record in a random
dialect (tests/dialect_text.py for sweeps), puts rows that cannot be read among
its rows (a text line, '#N/A', NaN, the SCPI-1999 9.91E37 / 9.9E37 markers,
a short row, a zero frequency, an exact repeat in a trace), and checks both
readings against what was written: the error's line is the first such row, and
the rows read plus the rows skipped are the rows written, with the printed values.
Further cases generate the other shapes of issue 21 (thousands separators,
two traces under repeated headers, up-and-down sweeps, repeats that disagree,
header units nobody knows, radians under a degrees header, scope timing).

Every read runs within the time and memory bound of tests/fuzz_mutate.py.  The
normal suite runs a few dozen examples per test; ``make fuzz`` runs 10 000 each.
"""

import numpy as np
import pytest
from dialect_text import FORMS, write_dialect
from fuzz_mutate import bounded
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from benchfit.data import read_sweep, read_trace
from benchfit.errors import InputError

pytestmark = [pytest.mark.filterwarnings("error::RuntimeWarning"),
              pytest.mark.filterwarnings("error::UserWarning")]

NORMAL = settings(max_examples=40, deadline=None,
                  suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])
FUZZ = settings(deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture,
                                                      HealthCheck.too_slow, HealthCheck.data_too_large])
TEXT = ["Marker 1: 5 kHz", "-- sweep paused at 12 kHz --", "Note: range changed to 2"]


@st.composite
def sweeps(draw, n_min=3, n_max=40):
    n = draw(st.integers(n_min, n_max))
    f0 = draw(st.floats(0.5, 1e5))
    ratio = draw(st.floats(1.01, 1.6))
    rng = np.random.default_rng(draw(st.integers(0, 2**32 - 1)))
    mags = 10 ** rng.uniform(-3, 3, n)
    ph = rng.uniform(-3.1, 3.1, n)
    return f0 * ratio ** np.arange(n), mags * np.exp(1j * ph)


@st.composite
def smooth_sweeps(draw, n_min=6, n_max=60):
    """A measured-looking response: two real poles and a little noise (0.05 dB, 0.3 deg)."""
    n = draw(st.integers(n_min, n_max))
    f = np.logspace(draw(st.floats(0, 3)), draw(st.floats(4, 7)), n)
    fc = draw(st.floats(10, 1e5))
    gain = draw(st.floats(0.1, 1e3))
    rng = np.random.default_rng(draw(st.integers(0, 2**32 - 1)))
    h = gain / ((1 + 1j * f / fc) * (1 + 1j * f / (30 * fc)))
    h = h * 10 ** (rng.normal(0, 0.05, n) / 20) * np.exp(1j * np.radians(rng.normal(0, 0.3, n)))
    return f, h


@st.composite
def dialects(draw):
    sep = draw(st.sampled_from([",", ";", "\t", " ", "  "]))
    return dict(sep=sep, decimal="." if sep == "," else draw(st.sampled_from([".", ","])),
                header=draw(st.sampled_from(["paren", "bracket", "underscore", "unit_row", "none"])),
                freq_unit=draw(st.sampled_from(["Hz", "kHz", "MHz"])),
                form=draw(st.sampled_from(sorted(FORMS))), comments=draw(st.booleans()),
                crlf=draw(st.booleans()), bom=draw(st.booleans()),
                descending=draw(st.booleans()), metadata=draw(st.booleans()))


def _bad_line(draw, kind: str, row: str, sep: str, decimal: str) -> str:
    cells = row.split() if sep.strip() == "" else row.split(sep)
    join = sep
    if kind == "text":
        return draw(st.sampled_from(TEXT))
    if kind == "na":
        return join.join(["#N/A"] * 3 if draw(st.booleans()) else [cells[0], "#N/A", "#N/A"])
    if kind == "scpi":
        marker = draw(st.sampled_from(["9.91E+37", "9.9E37", "-9.9E+37", "9.91e37"]))
        marker = marker.replace(".", ",") if decimal == "," else marker
        j = draw(st.integers(0, 2))
        return join.join(marker if k == j else c for k, c in enumerate(cells))
    if kind == "nan":
        j = draw(st.integers(1, 2))
        return join.join(draw(st.sampled_from(["nan", "NaN", "inf", "-inf"])) if k == j else c
                         for k, c in enumerate(cells))
    if kind == "short":
        return join.join(cells[:2])
    return join.join(["0", *cells[1:]])  # zero frequency


@st.composite
def damaged_sweeps(draw):
    """(bytes, options, written, injected 1-based lines in order)."""
    f, h = draw(sweeps())
    dialect = draw(dialects())
    w = write_dialect(f, h, **dialect)
    text = w.data.decode("utf-8-sig").replace("\r\n", "\n")
    lines = text.rstrip("\n").split("\n")
    n = f.size
    first = len(lines) - n  # index of the first data row
    rows = lines[first:]
    inject: list[tuple[int, str]] = []  # (position among rows: before rows[pos], line)
    # fewer bad rows than a third of the good ones: the rows' own width must stay the majority
    for _ in range(draw(st.integers(0, min(4, n // 3)))):
        kind = draw(st.sampled_from(["text", "na", "scpi", "nan", "short", "zero"]))
        if kind == "text":  # a text line is a row only among rows (after the last it is a footer)
            pos = draw(st.integers(1, n - 1))
        elif dialect["header"] == "none" and kind != "na":
            pos = draw(st.integers(1, n))  # above numbers with no names it would be metadata
        else:
            pos = draw(st.integers(0, n))
        template = rows[draw(st.integers(0, n - 1))]
        inject.append((pos, _bad_line(draw, kind, template, dialect["sep"], dialect["decimal"])))
    inject.sort(key=lambda x: x[0])
    out = lines[:first]
    bad_lines = []
    k = 0
    for pos in range(n + 1):
        while k < len(inject) and inject[k][0] == pos:
            out.append(inject[k][1])
            bad_lines.append(len(out))
            k += 1
        if pos < n:
            out.append(rows[pos])
    data = ("\n".join(out) + "\n").encode("utf-8")
    return data, w.options, w, bad_lines


def _check_damaged_sweep(tmp_path_factory, case):
    data, options, w, bad_lines = case
    p = tmp_path_factory.mktemp("rows") / "sweep.csv"
    p.write_bytes(data)
    if bad_lines:
        with pytest.raises(InputError) as e:
            bounded(lambda: read_sweep(p, **options), len(data))
        assert e.value.line == bad_lines[0], (str(e.value), bad_lines)
    r = bounded(lambda: read_sweep(p, skip_bad_rows=True, **options), len(data))
    # rows read + rows skipped == rows written, and the rows read are the rows printed
    assert len(r) == w.freq_hz.size
    assert [s["line"] for s in r.meta["skipped_rows"]] == bad_lines
    assert r.provenance.settings.get("skipped_rows", []) == bad_lines
    np.testing.assert_allclose(r.freq_hz, w.freq_hz, rtol=1e-12)
    np.testing.assert_allclose(r.response, w.response, rtol=1e-9, atol=1e-12)


@NORMAL
@given(case=damaged_sweeps())
def test_no_row_of_a_sweep_goes_missing(tmp_path_factory, case):
    _check_damaged_sweep(tmp_path_factory, case)


@st.composite
def damaged_traces(draw):
    """(bytes, times, channel values, injected lines) of a scope export with a time column."""
    sep = draw(st.sampled_from([",", ";", "\t"]))
    dec = "." if sep == "," else draw(st.sampled_from([".", ","]))
    n = draw(st.integers(3, 60))
    rng = np.random.default_rng(draw(st.integers(0, 2**32 - 1)))
    dt = draw(st.sampled_from([1e-9, 2e-7, 1e-6, 1e-3]))
    pre = draw(st.integers(0, n - 1))
    t = (np.arange(n) - pre) * dt
    v = rng.normal(0, 1, n)

    def num(x):
        s = f"{x:.9e}"
        return s.replace(".", ",") if dec == "," else s

    rows = [sep.join([num(a), num(b)]) for a, b in zip(t, v, strict=True)]
    lines = [draw(st.sampled_from(["Scope export", "Model,simulated", "# comment"])),
             sep.join(["Time (s)", "CH1 (V)"])]
    inject = []
    for _ in range(draw(st.integers(0, 3))):
        kind = draw(st.sampled_from(["text", "na", "scpi", "repeat"]))
        if kind == "text":
            pos = draw(st.integers(1, n - 1))
            line = draw(st.sampled_from(TEXT))
        elif kind == "repeat":  # a row written twice
            pos = draw(st.integers(1, n))
            line = rows[pos - 1]
        elif kind == "na":
            pos = draw(st.integers(0, n))
            line = sep.join([num(t[min(pos, n - 1)]), "#N/A"])
        else:
            pos = draw(st.integers(0, n))
            line = sep.join([num(t[min(pos, n - 1)]), "9,91E+37" if dec == "," else "9.91E+37"])
        inject.append((pos, line))
    inject.sort(key=lambda x: x[0])
    out, bad_lines, k = list(lines), [], 0
    for pos in range(n + 1):
        while k < len(inject) and inject[k][0] == pos:
            out.append(inject[k][1])
            bad_lines.append(len(out))
            k += 1
        if pos < n:
            out.append(rows[pos])
    # a repeat right after a repeat of the same row repeats it: still each one line bad
    return ("\n".join(out) + "\n").encode(), t, v, bad_lines


def _check_damaged_trace(tmp_path_factory, case):
    data, t, v, bad_lines = case
    p = tmp_path_factory.mktemp("rows") / "scope.csv"
    p.write_bytes(data)
    if bad_lines:
        with pytest.raises(InputError) as e:
            bounded(lambda: read_trace(p), len(data))
        assert e.value.line == bad_lines[0], (str(e.value), bad_lines)
    tr = bounded(lambda: read_trace(p, skip_bad_rows=True), len(data))
    assert len(tr) == t.size
    assert [s["line"] for s in tr.meta["skipped_rows"]] == bad_lines
    np.testing.assert_allclose(tr.time_s, t, rtol=1e-8, atol=1e-20)
    np.testing.assert_allclose(tr.channel(0), v, rtol=1e-8)


@NORMAL
@given(case=damaged_traces())
def test_no_row_of_a_trace_goes_missing(tmp_path_factory, case):
    _check_damaged_trace(tmp_path_factory, case)


# ----- the other shapes of issue 21 ----------------------------------------------------------
@st.composite
def shapes(draw):
    """(name, bytes, check) for one generated shape; check(read) asserts what must hold."""
    f, h = draw(smooth_sweeps())
    n = f.size
    sep = draw(st.sampled_from([";", "\t"]))
    head = sep.join(["Frequency (Hz)", "Gain (dB)", "Phase (deg)"])
    db = 20 * np.log10(np.abs(h))
    deg = np.degrees(np.angle(h))
    rows = [sep.join([f"{a:.9g}", f"{b:.4f}", f"{c:.3f}"]) for a, b, c in zip(f, db, deg, strict=True)]
    pf = np.array([float(r.split(sep)[0]) for r in rows])
    kind = draw(st.sampled_from(["thousands", "two_traces", "up_down", "disagree", "unit",
                                 "rad_as_deg"]))
    if kind == "thousands":
        rows = [sep.join([f"{a:,.3f}", *r.split(sep)[1:]]) for a, r in zip(pf, rows, strict=True)]

        def check(read):
            r = read()
            np.testing.assert_allclose(r.freq_hz, [float(f"{a:.3f}") for a in pf], rtol=1e-12)
        body = [head, *rows]
    elif kind == "two_traces":
        k = draw(st.integers(2, n - 2))
        body = [head, *rows[:k], "", head, *rows[k:]]

        def check(read):
            assert len(read()) == k and len(read(trace=2)) == n - k
    elif kind == "up_down":
        body = [head, *rows, *rows[::-1]]

        def check(read):
            r = read()
            assert len(r) == n and not any("disagree" in w for w in r.meta["warnings"])
    elif kind == "disagree":
        j = draw(st.integers(0, n - 1))
        a, b, c = rows[j].split(sep)
        body = [head, *rows, sep.join([a, f"{float(b) + 10:.4f}", f"{float(c) + 90:.3f}"])]

        def check(read):
            r = read()
            assert len(r) == n
            w = [x for x in r.meta["warnings"] if "disagree" in x]
            assert w and f"lines {j + 2}, {n + 2}" in w[0], r.meta["warnings"]
    elif kind == "unit":
        word, col = draw(st.sampled_from([("furlongs", "Frequency (furlongs)"),
                                          ("grad", "Phase (grad)")]))
        body = [head.replace("(Hz)" if word == "furlongs" else "(deg)", f"({word})"), *rows]

        def check(read):
            with pytest.raises(InputError) as e:
                read()
            assert e.value.column == col
    else:  # radians written under a degrees header
        rows = [sep.join([r.split(sep)[0], r.split(sep)[1], f"{np.angle(x):.5f}"])
                for r, x in zip(rows, h, strict=True)]
        peak = max(abs(float(r.split(sep)[2])) for r in rows)
        body = [head, *rows]

        def check(read):
            r = read()
            assert any("labelled degrees" in w for w in r.meta["warnings"]) == (0.2 < peak)
    return kind, ("\n".join(body) + "\n").encode(), check


@NORMAL
@given(case=shapes())
def test_issue_21_shapes(tmp_path_factory, case):
    kind, data, check = case
    p = tmp_path_factory.mktemp("shape") / f"{kind}.csv"
    p.write_bytes(data)
    check(lambda **o: bounded(lambda: read_sweep(p, **o), len(data)))


@st.composite
def timings(draw):
    """(name, bytes, check) of a scope export with a timing shape."""
    n = draw(st.integers(40, 300))
    dt = draw(st.sampled_from([1e-9, 1e-6, 5e-5]))
    rng = np.random.default_rng(draw(st.integers(0, 2**32 - 1)))
    v = rng.normal(0, 1, n)
    kind = draw(st.sampled_from(["interval_line", "gap", "rate", "jitter", "stamps_twice", "clean"]))
    if kind == "interval_line":
        unit, scale = draw(st.sampled_from([("us", 1e6), ("ns", 1e9), ("ms", 1e3)]))
        body = [f"Sample Interval,{dt:.6E}", f"Horizontal Units,{unit}", "", "CH1 (V)",
                *(f"{x:.6f}" for x in v)]

        def check(tr):
            assert tr.sample_interval_s == pytest.approx(dt, rel=1e-9)
        return kind, ("\n".join(body) + "\n").encode(), check
    k = np.arange(n, dtype=float)
    at = draw(st.integers(10, n - 10))
    if kind == "gap":
        k[at:] += draw(st.integers(2, 50))
    elif kind == "rate":
        k[at:] = k[at] + (k[at:] - k[at]) * draw(st.sampled_from([0.5, 2.0, 4.0]))
    elif kind == "jitter":
        k += rng.uniform(-0.3, 0.3, n)
    elif kind == "stamps_twice":
        k = np.floor(k / 2) * 2
    t = k * dt
    body = ["Time (s),CH1 (V)", *(f"{a:.9e},{b:.6f}" for a, b in zip(t, v, strict=True))]
    word = {"gap": "jumps", "rate": "sample interval changes", "jitter": "jitter"}.get(kind)

    def check(read):
        if kind == "stamps_twice":
            with pytest.raises(InputError, match="repeats the row before"):
                read()
            return
        tr = read()
        np.testing.assert_allclose(tr.time_s, t, rtol=1e-8, atol=dt * 1e-6)
        if word is None:
            assert tr.meta["warnings"] == []
        else:
            assert any(word in w for w in tr.meta["warnings"]), tr.meta["warnings"]
    return kind, ("\n".join(body) + "\n").encode(), check


@NORMAL
@given(case=timings())
def test_scope_timing_shapes(tmp_path_factory, case):
    kind, data, check = case
    p = tmp_path_factory.mktemp("timing") / f"{kind}.csv"
    p.write_bytes(data)
    if kind == "interval_line":
        check(bounded(lambda: read_trace(p), len(data)))
    else:
        check(lambda: bounded(lambda: read_trace(p), len(data)))


# ----- `make fuzz` --------------------------------------------------------------------------
@pytest.mark.fuzz
@FUZZ
@given(case=damaged_sweeps())
def test_no_row_of_a_sweep_goes_missing_fuzz(tmp_path_factory, case):
    _check_damaged_sweep(tmp_path_factory, case)


@pytest.mark.fuzz
@FUZZ
@given(case=damaged_traces())
def test_no_row_of_a_trace_goes_missing_fuzz(tmp_path_factory, case):
    _check_damaged_trace(tmp_path_factory, case)


@pytest.mark.fuzz
@FUZZ
@given(case=shapes())
def test_issue_21_shapes_fuzz(tmp_path_factory, case):
    test_issue_21_shapes.hypothesis.inner_test(tmp_path_factory, case)


@pytest.mark.fuzz
@FUZZ
@given(case=timings())
def test_scope_timing_shapes_fuzz(tmp_path_factory, case):
    test_scope_timing_shapes.hypothesis.inner_test(tmp_path_factory, case)
