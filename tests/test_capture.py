"""Capture end to end against the simulated instrument through genuine pyvisa paths.

The device under test is a first-order RC low-pass times a gain,
H = 10 / (1 + j f / 1 kHz) (textbook formula), so every saved point can be
checked against the plant within the noise the simulator adds.
"""

import dataclasses
import json

import numpy as np
import pytest

from benchfit.bench.capture import (
    CaptureResult,
    CaptureSettings,
    manifest_path,
    run_capture,
    to_complex,
)
from benchfit.bench.profile import find_profile
from benchfit.bench.progress import ProgressBar, format_progress
from benchfit.bench.sim_transport import simulated_session
from benchfit.bench.simulator import SimulatedAnalyzer
from benchfit.data.canonical import read_canonical_sweep
from benchfit.errors import InputError
from benchfit.fileio import read_json, to_json_text

NOISE = 1e-3


def plant(f):
    return 10.0 / (1.0 + 1j * np.asarray(f, dtype=float) / 1e3)


def profile(**changes):
    base = dataclasses.replace(find_profile("generic-analyzer"), timeout_s=1.0, complete_timeout_s=None)
    return dataclasses.replace(base, **changes)


def check_against_plant(resp, n):
    assert len(resp) == n
    assert np.all(np.diff(resp.freq_hz) > 0)
    rel = np.abs(resp.response / plant(resp.freq_hz) - 1)
    # complex Gaussian relative noise of rms 1e-3: |e| is Rayleigh, P(|e| > 5 rms) = exp(-25)
    assert rel.max() < 5 * NOISE
    assert 0.5 * NOISE < np.sqrt(np.mean(rel ** 2)) < 1.5 * NOISE  # noise really is there


@pytest.mark.parametrize("encoding,order", [("ascii", "big"), ("real32", "big"),
                                            ("real64", "big"), ("real64", "little"),
                                            ("real32", "little")])
@pytest.mark.parametrize("mode,segment", [("sweep", 0), ("sweep", 8), ("step", 0)])
def test_modes_and_encodings_pyvisa_sim(tmp_path, encoding, order, mode, segment):
    inst = SimulatedAnalyzer(plant, noise=NOISE, seed=1)
    settings = CaptureSettings(10, 1e5, 33, mode=mode, segment_points=segment)
    out = tmp_path / "cap.csv"
    with simulated_session(inst, profile(encoding=encoding, byte_order=order), folder=tmp_path) as s:
        result = run_capture(s, settings, out)
    assert result.complete and result.points_saved == 33
    assert inst.encoding == encoding
    check_against_plant(read_canonical_sweep(out), 33)
    if mode == "sweep":
        assert inst.sweeps == (1 if segment == 0 else 4)   # 33 points in segments of 8 -> 8,8,8,9
    else:
        assert inst.sweeps == 33


def test_over_loopback_tcp_socket(tmp_path):
    inst = SimulatedAnalyzer(plant, noise=NOISE, seed=2)
    out = tmp_path / "tcp.csv"
    with simulated_session(inst, profile(), transport="tcp") as s:
        run_capture(s, CaptureSettings(100, 1e4, 21, spacing="lin", segment_points=5), out)
    resp = read_canonical_sweep(out)
    check_against_plant(resp, 21)
    np.testing.assert_allclose(np.diff(resp.freq_hz), 495.0, rtol=1e-9)


def test_magnitude_phase_form(tmp_path):
    prof = profile(response_form="db_deg")
    inst = SimulatedAnalyzer(plant, noise=NOISE, data_form="db_deg")
    with simulated_session(inst, prof, folder=tmp_path) as s:
        run_capture(s, CaptureSettings(10, 1e5, 17), tmp_path / "db.csv")
    check_against_plant(read_canonical_sweep(tmp_path / "db.csv"), 17)


def test_to_complex_forms():
    # 20 dB is a gain of 10 (dB = 20 log10 |H|); +90 degrees is +j
    np.testing.assert_allclose(to_complex([20.0, 90.0], "db_deg"), [10j], atol=1e-12)
    np.testing.assert_allclose(to_complex([2.0, -180.0], "lin_deg"), [-2.0], atol=1e-12)
    np.testing.assert_allclose(to_complex([1.0, -2.0, 3.0, 4.0], "re_im"), [1 - 2j, 3 + 4j])


def test_frequency_axis_comes_from_the_instrument(tmp_path):
    """With an axis query in the profile, the instrument's own axis is saved."""
    inst = SimulatedAnalyzer(plant, noise=NOISE, freq_resolution_hz=0.5)
    settings = CaptureSettings(10.3, 1e4, 25)
    base = profile()
    prof = profile(commands={**base.commands, "axis_query": "SENSe:SWEep:AXIS?"})  # simulator's own query
    with simulated_session(inst, prof, folder=tmp_path) as s:
        run_capture(s, settings, tmp_path / "q.csv")
    f = read_canonical_sweep(tmp_path / "q.csv").freq_hz
    np.testing.assert_allclose(f / 0.5, np.round(f / 0.5), atol=1e-9)   # what the instrument used
    assert np.any(np.abs(f - settings.grid()) > 1e-3)                    # not what was asked
    # the instrument rounds start to 10.5 Hz, sweeps log from there and rounds each point
    expected = np.round(np.geomspace(10.5, 1e4, 25) / 0.5) * 0.5
    np.testing.assert_allclose(f, expected, rtol=1e-12)


def test_axis_rebuilt_from_read_back_settings_without_axis_query(tmp_path):
    """The shipped profile has no axis query (none is standard): start, stop and points are
    read back and the log grid rebuilt, so an instrument that rounded its start is seen."""
    assert not find_profile("generic-analyzer").has("axis_query")
    inst = SimulatedAnalyzer(plant, noise=NOISE, freq_resolution_hz=0.5)
    with simulated_session(inst, profile(), folder=tmp_path) as s:
        run_capture(s, CaptureSettings(10.3, 1e4, 25), tmp_path / "r.csv")
    f = read_canonical_sweep(tmp_path / "r.csv").freq_hz
    np.testing.assert_allclose(f, np.geomspace(10.5, 1e4, 25), rtol=1e-12)
    # and the response is the plant's at those frequencies (each point within the per-point
    # rounding of the instrument, 0.25 Hz, of the rebuilt one)
    check_against_plant(read_canonical_sweep(tmp_path / "r.csv"), 25)


def test_axis_rebuilt_without_any_read_back(tmp_path):
    base = profile()
    cmds = {k: v for k, v in base.commands.items() if not k.endswith("_query") or k == "data_query"}
    cmds["error_query"], cmds["cw_query"] = base.commands["error_query"], base.commands["cw_query"]
    inst = SimulatedAnalyzer(plant, noise=NOISE)
    with simulated_session(inst, profile(commands=cmds), folder=tmp_path) as s:
        run_capture(s, CaptureSettings(100, 1e4, 11, spacing="lin"), tmp_path / "l.csv")
    np.testing.assert_allclose(read_canonical_sweep(tmp_path / "l.csv").freq_hz,
                               np.linspace(100, 1e4, 11), rtol=1e-12)


def test_header_meta_and_manifest(tmp_path):
    inst = SimulatedAnalyzer(plant)
    out = tmp_path / "m.csv"
    with simulated_session(inst, profile(), folder=tmp_path) as s:
        res = run_capture(s, CaptureSettings(10, 1e4, 9, level_v=0.02, bandwidth_hz=10,
                                             quantity="plant"), out)
    resp = read_canonical_sweep(out)
    meta = resp.meta
    assert meta["instrument"] == inst.idn and meta["profile"] == "generic-analyzer"
    assert meta["settings"]["points"] == 9 and meta["complete"] is True
    assert meta["start_time"] <= meta["end_time"]
    assert resp.quantity == "plant"
    assert inst.level_v == 0.02 and inst.bandwidth_hz == 10
    m = read_json(manifest_path(out))
    assert m["complete"] and m["rows"] == 9 and m["bytes"] == out.stat().st_size
    # result object round-trips through JSON
    again = CaptureResult.from_dict(json.loads(to_json_text(res)))
    assert again.to_dict() == res.to_dict()
    assert "captured 9 points" in res.summary()


def test_the_file_reads_with_the_general_sweep_reader(tmp_path):
    pytest.importorskip("benchfit.data.sweep_reader")
    from benchfit.data import read_sweep

    with simulated_session(SimulatedAnalyzer(plant), profile(), folder=tmp_path) as s:
        run_capture(s, CaptureSettings(10, 1e4, 9), tmp_path / "r.csv")
    assert len(read_sweep(tmp_path / "r.csv")) == 9


def test_existing_output_needs_resume(tmp_path):
    out = tmp_path / "x.csv"
    out.write_text("keep me")
    with simulated_session(SimulatedAnalyzer(plant), profile(), folder=tmp_path) as s:
        with pytest.raises(InputError, match="pass --resume"):
            run_capture(s, CaptureSettings(10, 1e4, 9), out)
    assert out.read_text() == "keep me"


def test_resume_checks_settings_and_finished_capture_is_kept(tmp_path):
    out = tmp_path / "r.csv"
    with simulated_session(SimulatedAnalyzer(plant), profile(), folder=tmp_path) as s:
        run_capture(s, CaptureSettings(10, 1e4, 9), out)
        before = out.read_bytes()
        with pytest.raises(InputError, match="--points"):
            run_capture(s, CaptureSettings(10, 1e4, 11), out, resume=True)
        res = run_capture(s, CaptureSettings(10, 1e4, 9), out, resume=True)
    assert res.complete and out.read_bytes() == before


def test_missing_profile_command_stops_before_any_io(tmp_path):
    cmds = dict(find_profile("generic-analyzer").commands)
    del cmds["level"]
    inst = SimulatedAnalyzer(plant)
    with simulated_session(inst, profile(commands=cmds), folder=tmp_path) as s:
        with pytest.raises(InputError, match=r"level \(needed for --level\)"):
            run_capture(s, CaptureSettings(10, 1e4, 9, level_v=0.1), tmp_path / "n.csv")
    assert inst.log == [] and not (tmp_path / "n.csv").exists()


@pytest.mark.parametrize("kw,option", [({"start_hz": -1}, "--start"), ({"stop_hz": 5}, "--stop"),
                                       ({"points": 1}, "--points"), ({"spacing": "exp"}, "--spacing"),
                                       ({"mode": "burst"}, "--mode"), ({"level_v": 0}, "--level"),
                                       ({"segment_points": 1}, "--segment-points")])
def test_settings_validation_names_option(kw, option):
    base = {"start_hz": 10.0, "stop_hz": 1e4, "points": 9}
    with pytest.raises(InputError) as info:
        CaptureSettings(**{**base, **kw}).validate()
    assert option in str(info.value)


def test_grid_matches_numpy_reference():
    # numpy.geomspace / linspace are the reference grids
    np.testing.assert_allclose(CaptureSettings(10, 1e5, 41).grid(), np.geomspace(10, 1e5, 41), rtol=1e-12)
    np.testing.assert_allclose(CaptureSettings(10, 1e5, 41, spacing="lin").grid(),
                               np.linspace(10, 1e5, 41), rtol=1e-12)


def test_segments_cover_grid_once():
    s = CaptureSettings(10, 1e5, 17, segment_points=8)
    assert s.segments() == [(0, 8), (8, 17)]          # a lone last point joins the one before
    s = CaptureSettings(10, 1e5, 20, segment_points=8)
    assert s.segments() == [(0, 8), (8, 16), (16, 20)]
    s = CaptureSettings(10, 1e5, 5, mode="step")
    assert s.segments() == [(i, i + 1) for i in range(5)]


def test_progress_text_and_callback(tmp_path):
    assert format_progress(50, 100, 4.0, width=10) == "[#####-----] 50/100 points  12.5 pt/s  0:04 left"
    assert format_progress(0, 100, 0.0, width=4) == "[----] 0/100 points  -- pt/s  --:-- left"
    # a resumed run counts only its own points towards the rate
    assert "5 pt/s  0:10 left" in format_progress(50, 100, 2.0, already=40)
    seen = []
    with simulated_session(SimulatedAnalyzer(plant), profile(), folder=tmp_path) as s:
        run_capture(s, CaptureSettings(10, 1e4, 6, mode="step"), tmp_path / "p.csv",
                    progress=lambda d, t: seen.append((d, t)))
    assert seen == [(i, 6) for i in range(7)]


def test_progress_bar_writes_lines_when_forced():
    import io

    buf = io.StringIO()
    bar = ProgressBar(10, stream=buf, force=True, clock=iter([0.0, 0.0, 0.0, 2.0]).__next__)
    bar(0)
    bar(5)
    assert buf.getvalue().splitlines()[-1].startswith("[############------------] 5/10 points  2.5 pt/s")
