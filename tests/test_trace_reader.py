"""The scope-trace reader: time from a column or a sample-interval line, units, channels."""

import numpy as np
import pytest

from benchfit.data import TimeTrace, read_trace, write_trace_csv
from benchfit.errors import InputError


def _file(tmp_path, text, name="scope.csv"):
    p = tmp_path / name
    p.write_bytes(text if isinstance(text, bytes) else text.encode("utf-8"))
    return p


def _wave(n=50, dt=2e-6, t0=-20e-6):
    t = t0 + dt * np.arange(n)
    return t, np.where(t >= 0, 1.0, 0.0), 3.3 + 0.1 * np.sin(2 * np.pi * 5e3 * t)


@pytest.mark.parametrize("unit,scale", [("s", 1.0), ("ms", 1e3), ("us", 1e6), ("µs", 1e6), ("ns", 1e9)])
@pytest.mark.parametrize("style", ["Time ({u})", "t/{u}", "time_{u}", "TIME [{u}]"])
def test_time_column_units(tmp_path, unit, scale, style):
    t, a, b = _wave()
    head = style.format(u=unit)
    rows = "\n".join(f"{ti * scale:.9g},{x:.6f},{y:.6f}" for ti, x, y in zip(t, a, b, strict=True))
    tr = read_trace(_file(tmp_path, f"{head},CH1 (V),CH2 (V)\n{rows}\n"))
    np.testing.assert_allclose(tr.time_s, t, rtol=1e-9, atol=1e-15)
    assert tr.names == ["CH1", "CH2"]
    np.testing.assert_allclose(tr.channel("CH2"), np.round(b, 6))


def test_sample_interval_line_decimal_comma_and_mv(tmp_path):
    t, a, b = _wave(n=40, dt=0.5e-6, t0=-5e-6)
    rows = "\n".join(f"{x:.4f};{y * 1e3:.3f}".replace(".", ",") for x, y in zip(a, b, strict=True))
    text = f"Scope export\nSample interval;500 ns\nStart time;-5 us\n\nIout (A);Vout (mV)\n{rows}\n"
    tr = read_trace(_file(tmp_path, text))
    np.testing.assert_allclose(tr.time_s, t, rtol=1e-12, atol=1e-18)
    np.testing.assert_allclose(tr.channel("Vout"), np.round(b * 1e3, 3) / 1e3, rtol=1e-12)
    assert tr.meta["units"] == {"Iout": "A", "Vout": "V"}
    assert tr.meta["dialect"]["decimal"] == "," and tr.meta["dialect"]["time_source"] == "sample interval"


@pytest.mark.parametrize("lines,dt,t0", [
    (["Sample Interval,2.0E-07", "Trigger Point,10"], 2e-7, -2e-6),
    (["Sample rate: 5 MSa/s", "X start = -1e-6"], 2e-7, -1e-6),
    (["dt = 0.2 us"], 2e-7, 0.0),
    (["Horizontal units: us", "Sample interval: 0.2"], 2e-7, 0.0),
    (["Sample Interval,2.0E-07,s", "Start time,-0.4,us"], 2e-7, -4e-7),
])
def test_timing_metadata_forms(tmp_path, lines, dt, t0):
    rows = "\n".join(f"{k * 0.01:.3f}" for k in range(30))
    tr = read_trace(_file(tmp_path, "\n".join(lines) + "\nCH1\n" + rows + "\n"))
    np.testing.assert_allclose(tr.sample_interval_s, dt, rtol=1e-12)
    assert tr.time_s[0] == pytest.approx(t0, abs=1e-15)


def test_pick_channel_by_name_or_index(tmp_path):
    t, a, b = _wave()
    rows = "\n".join(f"{ti:.9g}\t{x:.6f}\t{y:.6f}" for ti, x, y in zip(t, a, b, strict=True))
    p = _file(tmp_path, f"Time (s)\tCH1 (V)\tCH2 (V)\n{rows}\n", "s.tsv")
    for pick in ("CH2", "ch2", 1, "1"):
        tr = read_trace(p, channel=pick)
        assert tr.names == ["CH2"]
    with pytest.raises(InputError, match="no channel 'CH3'"):
        read_trace(p, channel="CH3")


def test_headerless_time_column_guess_and_override(tmp_path):
    rows = "\n".join(f"{k * 1e-6:.9g} {np.sin(k / 5):.6f}" for k in range(40))
    p = _file(tmp_path, rows + "\n", "raw.dat")
    tr = read_trace(p)
    assert tr.names == ["ch1"] and any("column 1 as time" in w for w in tr.meta["warnings"])
    tr_us = read_trace(p, columns="time,probe", time_unit="ms")
    assert tr_us.names == ["probe"]
    assert tr_us.sample_interval_s == pytest.approx(1e-9)


def test_no_time_at_all_needs_an_interval(tmp_path):
    p = _file(tmp_path, "CH1,CH2\n1,2\n3,4\n5,6\n")
    with pytest.raises(InputError, match="sample-interval"):
        read_trace(p)
    tr = read_trace(p, sample_interval_s=1e-3)
    np.testing.assert_allclose(tr.time_s, [0, 1e-3, 2e-3])


def test_repeated_times_from_short_printing_are_rebuilt(tmp_path):
    # 0.25 us steps printed as whole us: 0, 0, 0, 1, 1, 1, 2 ... (repeats)
    t = 0.25e-6 * np.arange(12)
    rows = "\n".join(f"{ti * 1e6:.0f},{k}" for k, ti in enumerate(t))
    tr = read_trace(_file(tmp_path, "Time (us),CH1\n" + rows + "\n"))
    assert np.all(np.diff(tr.time_s) > 0)
    np.testing.assert_allclose(np.diff(tr.time_s), 0.25e-6, rtol=0.15)
    assert any("rebuilt" in w for w in tr.meta["warnings"])


def test_time_going_backwards_is_an_error(tmp_path):
    p = _file(tmp_path, "Time (s),CH1\n0,1\n1,1\n2,1\n0.5,1\n3,1\n")
    with pytest.raises(InputError, match="does not increase") as e:
        read_trace(p)
    assert e.value.line == 5


def test_bad_cell_line_number(tmp_path):
    p = _file(tmp_path, "Time (s),CH1\n0,1\n1,oops\n2,1\n")
    with pytest.raises(InputError, match="non-numeric") as e:
        read_trace(p)
    assert e.value.line == 3


def test_canonical_trace_recognised(tmp_path):
    t, a, b = _wave()
    src = TimeTrace(time_s=t, channels={"in": a, "out": b}, meta={"probe": "10x"})
    p = write_trace_csv(src, tmp_path / "c.csv")
    tr = read_trace(p)
    np.testing.assert_allclose(tr.channel("out"), b, rtol=1e-12)
    assert tr.meta["probe"] == "10x"
    assert read_trace(p, channel="in").names == ["in"]


def test_sweep_file_is_refused(tmp_path):
    p = _file(tmp_path, "# benchfit sweep v1\nfreq_hz,re,im\n1,1,0\n2,1,0\n")
    with pytest.raises(InputError, match="read_sweep"):
        read_trace(p)
