"""Fault injection: nothing acknowledged is lost, and --resume completes with no duplicate or gap.

Faults: a timeout on the Nth query (late and lost replies), an instrument error
after a command, a dropped connection mid-sweep (pyvisa-sim and loopback TCP),
a torn last line, Ctrl-C, and SIGKILL of a capture subprocess.  The reference
for "no duplicate, no gap" is a capture of the same settings with no fault.
"""

import dataclasses
import os
import signal
import subprocess
import sys
import time

import numpy as np
import pytest

from benchfit.bench.capture import CaptureSettings, manifest_path, run_capture
from benchfit.bench.profile import find_profile
from benchfit.bench.scpi import parse_unit
from benchfit.bench.sim_transport import simulated_session
from benchfit.bench.simulator import Faults, SimulatedAnalyzer
from benchfit.data.canonical import read_canonical_sweep
from benchfit.errors import InstrumentError
from benchfit.fileio import read_json

NOISE = 1e-3


def plant(f):
    # H = 10 / (1 + j f / 1 kHz), first-order low-pass (textbook formula)
    return 10.0 / (1.0 + 1j * np.asarray(f, dtype=float) / 1e3)


def profile(**changes):
    base = dataclasses.replace(find_profile("generic-analyzer"), timeout_s=0.25, retries=2,
                               complete_timeout_s=None)
    return dataclasses.replace(base, **changes)


def capture(tmp_path, settings, out, *, faults=None, prof=None, transport="sim", resume=False):
    inst = SimulatedAnalyzer(plant, noise=NOISE, faults=faults)
    with simulated_session(inst, prof or profile(), transport=transport, folder=tmp_path / "sim") as s:
        return run_capture(s, settings, out, resume=resume), inst


def reference(tmp_path, settings):
    out = tmp_path / "reference.csv"
    _, inst = capture(tmp_path, settings, out)
    return read_canonical_sweep(out), inst.log


def query_number(log, header_start, occurrence):
    """1-based number (among queries) of the Nth query whose text starts with header_start."""
    n = seen = 0
    for unit in log:
        if parse_unit(unit).query:
            n += 1
            if unit.startswith(header_start):
                seen += 1
                if seen == occurrence:
                    return n
    raise AssertionError(f"no query {header_start!r} #{occurrence}")


def assert_complete_like(out, ref):
    resp = read_canonical_sweep(out)
    np.testing.assert_array_equal(resp.freq_hz, ref.freq_hz)     # no gap, no duplicate
    assert np.max(np.abs(resp.response / plant(resp.freq_hz) - 1)) < 5 * NOISE
    assert resp.meta["complete"] is True
    return resp


def acknowledged_rows(out):
    m = read_json(manifest_path(out))
    head = out.read_bytes()[: m["bytes"]].decode()
    rows = [r for r in head.splitlines() if r and r[0].isdigit()]
    assert len(rows) == m["rows"]
    return m["rows"]


SEG = CaptureSettings(10, 1e5, 30, segment_points=6)   # 5 native sweeps
STEP = CaptureSettings(10, 1e5, 12, mode="step")


@pytest.mark.parametrize("late", [0.4, None])
def test_timeout_on_nth_data_query_recovers(tmp_path, late):
    ref, log = reference(tmp_path, SEG)
    n = query_number(log, "CALCulate:DATA?", 3)
    out = tmp_path / "t.csv"
    result, inst = capture(tmp_path, SEG, out, faults=Faults(timeout_on_query=n, late_reply_s=late))
    assert result.complete and result.session["resyncs"] == 1 and result.session["timeouts"] == 1
    assert_complete_like(out, ref)


def test_retries_exhausted_midway_then_resume(tmp_path):
    ref, log = reference(tmp_path, STEP)
    n = query_number(log, "CALCulate:DATA?", 6)      # the 6th point never answers
    out = tmp_path / "r.csv"
    with pytest.raises(InstrumentError) as info:
        capture(tmp_path, STEP, out, faults=Faults(timeout_on_query=n), prof=profile(retries=0))
    msg = str(info.value)
    assert "5 of 12 points are saved" in msg and "--resume" in msg and "CALCulate:DATA?" in msg
    assert acknowledged_rows(out) == 5
    partial = read_canonical_sweep(out)                 # a valid canonical file after every append
    np.testing.assert_array_equal(partial.freq_hz, ref.freq_hz[:5])
    result, inst = capture(tmp_path, STEP, out, resume=True)
    assert result.complete and inst.sweeps == 7         # only the missing points were measured
    assert_complete_like(out, ref)


def test_instrument_error_midway_then_resume(tmp_path):
    ref, _ = reference(tmp_path, SEG)
    out = tmp_path / "e.csv"
    faults = Faults(error_on_header="INITiate[:IMMediate]", error_code=-222, error_on_occurrence=3)
    with pytest.raises(InstrumentError) as info:
        capture(tmp_path, SEG, out, faults=faults)
    msg = str(info.value)
    assert "after 'INITiate:IMMediate'" in msg and "-222 Data out of range" in msg
    assert "12 of 30 points are saved" in msg
    assert acknowledged_rows(out) == 12
    result, _ = capture(tmp_path, SEG, out, resume=True)
    assert result.complete
    assert_complete_like(out, ref)


@pytest.mark.parametrize("transport", ["sim", "tcp"])
def test_dropped_connection_mid_sweep_then_resume(tmp_path, transport):
    ref, log = reference(tmp_path, SEG)
    n = query_number(log, "*OPC?", 4)                  # link drops while waiting for sweep 4
    out = tmp_path / "d.csv"
    with pytest.raises(InstrumentError, match="connection lost|stopped answering") as info:
        capture(tmp_path, SEG, out, faults=Faults(drop_on_query=n), transport=transport)
    assert "18 of 30 points are saved" in str(info.value)
    assert acknowledged_rows(out) == 18
    result, _ = capture(tmp_path, SEG, out, transport=transport, resume=True)
    assert result.complete
    assert_complete_like(out, ref)


def test_torn_and_unacknowledged_rows_are_dropped_on_resume(tmp_path):
    ref, log = reference(tmp_path, STEP)
    out = tmp_path / "torn.csv"
    with pytest.raises(InstrumentError):
        capture(tmp_path, STEP, out, faults=Faults(drop_on_query=query_number(log, "*OPC?", 4)))
    assert acknowledged_rows(out) == 3
    with open(out, "a") as fh:   # a whole row the manifest never acknowledged, then a torn one
        fh.write(f"{ref.freq_hz[3]:.12e},1.0,0.0\n9.99e+03,1.2")
    result, _ = capture(tmp_path, STEP, out, resume=True)
    assert any("discarded" in w for w in result.warnings)
    assert_complete_like(out, ref)


def test_interrupt_in_process_keeps_saved_points(tmp_path):
    out = tmp_path / "i.csv"
    calls = []

    def progress(done, total):
        calls.append(done)
        if done == 4:
            raise KeyboardInterrupt

    inst = SimulatedAnalyzer(plant, noise=NOISE)
    with simulated_session(inst, profile(), folder=tmp_path / "sim") as s:
        result = run_capture(s, STEP, out, progress=progress)
    assert result.status == "interrupted" and result.points_saved == 4
    assert "4 of 12 points saved" in result.summary()
    assert acknowledged_rows(out) == 4
    ref, _ = reference(tmp_path, STEP)
    capture(tmp_path, STEP, out, resume=True)
    assert_complete_like(out, ref)


def _model_file(tmp_path):
    from benchfit.fitting.model import PlantModel

    wc = 2 * np.pi * 1e3
    path = tmp_path / "plant.json"
    PlantModel(zeros=[], poles=[-wc], k=10 * wc).to_json(path)   # 10 / (1 + s/wc)
    return path


def _cli(model, out, *extra):
    return [sys.executable, "-m", "benchfit", "capture", "--simulate", str(model), "--start", "10",
            "--stop", "1e5", "--points", "24", "--mode", "step", "--sim-point-time", "0.05",
            "--no-progress", "-o", str(out), *extra]


def _wait_rows(out, at_least, proc, limit_s=60.0):
    end = time.monotonic() + limit_s
    while time.monotonic() < end:
        assert proc.poll() is None, proc.communicate()
        try:
            if read_json(manifest_path(out))["rows"] >= at_least:
                return
        except Exception:  # noqa: BLE001 - manifest not written yet
            pass
        time.sleep(0.02)
    raise AssertionError("capture made no progress")


def _step_grid():
    # step mode: each point is the requested grid point rounded by the simulator to 1 mHz
    return np.round(np.geomspace(10, 1e5, 24) / 1e-3) * 1e-3


def test_sigkill_mid_capture_then_resume(tmp_path):
    # over pyvisa-py's real socket transport: the instrument link dies with the process
    transport = "tcp"
    model, out = _model_file(tmp_path), tmp_path / "k.csv"
    proc = subprocess.Popen(_cli(model, out, "--transport", transport),
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    try:
        _wait_rows(out, 8, proc)
    finally:
        proc.send_signal(signal.SIGKILL)
        proc.wait()
    acked = acknowledged_rows(out)
    assert 8 <= acked < 24
    done = subprocess.run(_cli(model, out, "--transport", transport, "--resume"),
                          capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    resp = read_canonical_sweep(out)
    np.testing.assert_allclose(resp.freq_hz, _step_grid(), rtol=1e-12)
    assert np.max(np.abs(resp.response / plant(resp.freq_hz) - 1)) < 5 * NOISE
    assert read_json(manifest_path(out))["complete"]


def test_ctrl_c_stops_cleanly_and_says_how_many_points(tmp_path):
    model, out = _model_file(tmp_path), tmp_path / "c.csv"
    proc = subprocess.Popen(_cli(model, out), stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                            text=True)
    _wait_rows(out, 5, proc)
    proc.send_signal(signal.SIGINT)
    _, err = proc.communicate(timeout=60)
    assert proc.returncode == 130, err
    saved = read_json(manifest_path(out))["rows"]
    assert f"{saved} of 24 points saved" in err and "--resume" in err
    assert "Traceback" not in err
    done = subprocess.run(_cli(model, out, "--resume"), capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    np.testing.assert_allclose(read_canonical_sweep(out).freq_hz, _step_grid(), rtol=1e-12)


def test_resume_of_unfinished_file_without_manifest_is_refused(tmp_path):
    out = tmp_path / "x.csv"
    out.write_text("# benchfit sweep v1\n")
    with pytest.raises(Exception, match="nothing to resume"):
        capture(tmp_path, STEP, out, resume=True)
    assert os.path.getsize(out) == len("# benchfit sweep v1\n")
