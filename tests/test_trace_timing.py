"""Scope exports: the time axis as the file states it (issue 21 item 5), and the row rule.

The files are built here in the layouts other makers' scopes export (a metadata
block of 'key,value' lines, then names and rows), so the reader keeps reading
them whatever benchfit's own sample files look like.
"""

import numpy as np
import pytest

from benchfit.data import read_trace
from benchfit.data.timing import printed_step, time_axis_findings
from benchfit.errors import InputError

pytestmark = pytest.mark.filterwarnings("error::RuntimeWarning")

N = 400
K = np.arange(N) - 100
STEP = np.where(K < 0, 0.0, 1.0 - np.exp(-np.clip(K, 0, None) / 20.0))  # a first-order step


def _file(tmp_path, lines, name="scope.csv"):
    p = tmp_path / name
    p.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return p


def _rise_10_90(t, y):
    lo = t[np.argmax(y >= 0.1)]
    hi = t[np.argmax(y >= 0.9)]
    return hi - lo


def test_bare_interval_beside_horizontal_units_is_seconds(tmp_path):
    # issue 21 item 5: 'Sample Interval,1.0E-06' beside 'Horizontal Units,us' and no time column
    # was read as 1e-6 us = 1 ps per sample (rise time 40 ps instead of 40 us)
    meta = ["Record Length,400", "Sample Interval,1.0E-06", "Trigger Point,100",
            "Horizontal Units,us", ""]
    tr = read_trace(_file(tmp_path, [*meta, "CH1 (V)", *(f"{v:.5f}" for v in STEP)]))
    assert tr.sample_interval_s == pytest.approx(1e-6, rel=1e-12)
    assert tr.time_s[0] == pytest.approx(-100e-6)
    # first-order step, tau = 20 samples: 10-90 % rise = tau ln 9 (textbook first-order response)
    assert _rise_10_90(tr.time_s, tr.channel(0)) == pytest.approx(20e-6 * np.log(9), rel=0.05)
    assert any("read in seconds" in w for w in tr.meta["warnings"])


def test_interval_in_the_horizontal_unit_is_still_read_so(tmp_path):
    tr = read_trace(_file(tmp_path, ["Horizontal units: us", "Sample interval: 0.2", "CH1",
                                     *(f"{v:.4f}" for v in STEP[:50])]))
    assert tr.sample_interval_s == pytest.approx(2e-7, rel=1e-12)


def _timed(times, values=None):
    values = STEP[:len(times)] if values is None else values
    return ["Time (s),CH1 (V)", *(f"{t:.9e},{v:.6f}" for t, v in zip(times, values, strict=True))]


def test_clean_time_column_gives_no_warning(tmp_path):
    tr = read_trace(_file(tmp_path, _timed(K * 1e-6)))
    assert tr.meta["warnings"] == []


def test_gap_is_reported_with_its_line(tmp_path):
    t = np.concatenate([K[:200], K[210:]]) * 1e-6
    tr = read_trace(_file(tmp_path, _timed(t)))
    w = [x for x in tr.meta["warnings"] if "jumps" in x]
    assert w and "line 202" in w[0] and "11 sample" in w[0]


def test_change_of_sample_rate_is_reported(tmp_path):
    t = np.concatenate([np.arange(200) * 1e-6, 199e-6 + np.arange(1, 201) * 2e-6])
    tr = read_trace(_file(tmp_path, _timed(t)))
    w = [x for x in tr.meta["warnings"] if "sample interval changes" in x]
    assert w and "line 202" in w[0]


def test_jitter_is_reported(tmp_path):
    rng = np.random.default_rng(4)
    t = (K + rng.uniform(-0.2, 0.2, N)) * 1e-6
    tr = read_trace(_file(tmp_path, _timed(t)))
    assert any("jitter" in w for w in tr.meta["warnings"])


def test_stamps_repeated_with_digits_to_spare_are_an_error(tmp_path):
    # issue 21 item 5: every stamp written twice was "rebuilt" at half the interval,
    # halving the rise time
    t = np.repeat(K[::2] * 1e-6, 2)
    values = np.sin(np.arange(N) / 7.0)
    with pytest.raises(InputError, match="line 3.*repeats the row before.*no rounding"):
        read_trace(_file(tmp_path, _timed(t, values)))


def test_rows_repeated_exactly_are_duplicates(tmp_path):
    t = np.repeat(K[:100] * 1e-6, 2)
    v = np.repeat(STEP[:100], 2)
    p = _file(tmp_path, _timed(t, v))
    with pytest.raises(InputError, match="line 3: row repeats line 2 exactly"):
        read_trace(p)
    tr = read_trace(p, skip_bad_rows=True)
    assert len(tr) == 100 and tr.sample_interval_s == pytest.approx(1e-6)
    assert len(tr.meta["skipped_rows"]) == 100 and tr.provenance.settings["skipped_rows"][0] == 3


def test_stamps_printed_with_too_few_digits_are_still_rebuilt(tmp_path):
    # 0.4 us steps printed to 1 us: repeats the digits explain
    t = np.round(np.arange(60) * 0.4)
    v = np.sin(np.arange(60) / 5.0)
    lines = ["Time (us),CH1 (V)", *(f"{x:.0f},{y:.4f}" for x, y in zip(t, v, strict=True))]
    tr = read_trace(_file(tmp_path, lines))
    assert tr.sample_interval_s == pytest.approx(0.4e-6, rel=0.02)
    assert any("too few digits" in w for w in tr.meta["warnings"])


def test_text_line_in_a_trace_is_an_error_or_skipped(tmp_path):
    lines = _timed(K * 1e-6)
    lines.insert(150, "Cursor A: 12 us")
    p = _file(tmp_path, lines)
    with pytest.raises(InputError, match="line 151"):
        read_trace(p)
    tr = read_trace(p, skip_bad_rows=True)
    assert len(tr) == N and tr.meta["skipped_rows"][0]["line"] == 151


def test_scpi_marker_in_a_channel(tmp_path):
    lines = _timed(K * 1e-6)
    lines[10] = lines[10].split(",")[0] + ",9.91E+37"
    with pytest.raises(InputError, match="line 11, column CH1 .V.: value '9.91E.37' is the SCPI"):
        read_trace(_file(tmp_path, lines))


def test_printed_step():
    assert printed_step(["12.3", "4.5"]) == pytest.approx(0.1)
    assert printed_step(["1.000000000e-04", "-2.500000000e-06"]) == pytest.approx(1e-13)
    assert printed_step(["17", "3"]) == 1.0
    assert printed_step(["0,125", "x"]) == pytest.approx(1e-3)


def test_findings_on_an_even_axis_are_empty():
    t = np.arange(1000) * 1e-9
    assert time_axis_findings(t, np.arange(1000) + 1, 1e-18) == []


def test_interval_key_with_its_unit_in_brackets(tmp_path):
    tr = read_trace(_file(tmp_path, ["Sample interval (us): 0.5", "Start time (us): -10", "CH1",
                                     *(f"{v:.4f}" for v in STEP[:50])]))
    assert tr.sample_interval_s == pytest.approx(5e-7, rel=1e-12)
    assert tr.time_s[0] == pytest.approx(-1e-5, rel=1e-12)
