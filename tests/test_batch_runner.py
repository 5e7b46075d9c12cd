"""Running lots: identical rows on every path, bad files become error rows, resume after a kill."""

import os
import signal
import subprocess
import sys
import time

import numpy as np
import pytest

from benchfit.batch.limits import parse_limits
from benchfit.batch.runner import find_sweeps, run_lot
from benchfit.batch.synth_lot import make_lot
from benchfit.batch.table import read_table
from benchfit.batch.task import TaskSettings, run_task
from benchfit.data import TimeTrace, write_trace_csv
from benchfit.errors import InputError

# Common practice, no source: a converter loop is commonly held to >= 45 deg phase margin
# and >= 6 dB gain margin.  The generated lot sits near 56 deg / 17 dB, crossover near 25 kHz.
LIMITS = parse_limits("[margins]\nmin_phase_margin_deg = 45\nmin_gain_margin_db = 6\n"
                      "crossover_hz = [10e3, 60e3]\nrequire_stable = true\n")


@pytest.fixture(scope="module")
def lot(tmp_path_factory):
    """12 generated loop sweeps plus a corrupt, an empty and a non-sweep file."""
    d = tmp_path_factory.mktemp("lot")
    make_lot(d, 12, quantity="loop", seed=3)
    (d / "corrupt.csv").write_bytes(bytes(np.random.default_rng(0).integers(0, 256, 3000, dtype=np.uint8)))
    (d / "empty.csv").write_bytes(b"")
    t = np.linspace(0, 1e-3, 200)
    write_trace_csv(TimeTrace(time_s=t, channels={"vout": np.sin(t * 1e4)}), d / "scope_step.csv")
    (d / "notes.txt").write_text("unit 7 reworked, C12 replaced\n")
    return d


def _rows(path):
    return sorted(read_table(path)[1], key=lambda r: r["file"])


def test_bad_files_become_error_rows_and_the_rest_pass(lot, tmp_path):
    files = find_sweeps(lot)
    out = tmp_path / "r.csv"
    info = run_lot(files, TaskSettings(limits=LIMITS), out, workers=1, progress=None)
    rows = _rows(out)
    assert len(rows) == len(files) == 16 and info.ran == 16
    by_name = {os.path.basename(r["file"]): r for r in rows}
    bad = ("corrupt.csv", "empty.csv", "scope_step.csv", "notes.txt")
    for name in bad:
        r = by_name[name]
        assert r["status"] == "error", name
        assert r["error"], name
        assert r["phase_margin_deg"] is None
    good = [r for n, r in by_name.items() if n not in bad]
    assert len(good) == 12
    assert all(r["status"] == "pass" and r["reason"] is None for r in good), good
    # unit identity comes from the header's serial; the file name is the fallback
    assert by_name["unit_00004.csv"]["unit"] == "SN03-00004"
    assert by_name["notes.txt"]["unit"] == "notes"
    assert info.counts == {"pass": 12, "error": 4}


def test_serial_pool_and_dask_give_identical_rows(lot, tmp_path):
    distributed = pytest.importorskip("distributed")
    files = find_sweeps(lot)
    settings = TaskSettings(limits=LIMITS, params=())
    run_lot(files, settings, tmp_path / "serial.csv", workers=1, progress=None)
    info = run_lot(files, settings, tmp_path / "pool.csv", workers=2, progress=None)
    assert info.executor == "pool" and info.workers == 2
    with distributed.LocalCluster(processes=False, n_workers=1, threads_per_worker=2,
                                  dashboard_address=None) as cluster:
        info = run_lot(files, settings, tmp_path / "dask.csv", dask=cluster.scheduler_address,
                       progress=None)
    assert info.executor == "dask"
    serial = _rows(tmp_path / "serial.csv")
    assert len(serial) == len(files)
    assert _rows(tmp_path / "pool.csv") == serial
    assert _rows(tmp_path / "dask.csv") == serial


def test_task_row_matches_library_margins(lot):
    # The row carries the margins module's figures unchanged (no second computation).
    from benchfit.data import read_sweep
    from benchfit.loop.margins import margins_from_data

    path = str(lot / "unit_00002.csv")
    row = run_task(path, TaskSettings())
    r = read_sweep(path)
    m = margins_from_data(r.freq_hz, r.response)
    assert row["status"] == "measured" and row["margins_from"] == "data"
    assert row["phase_margin_deg"] == m.phase_margin_deg
    assert row["crossover_hz"] == m.crossover_hz
    assert row["gain_margin_db"] == m.gain_margin_db
    assert row["points"] == 401 and row["quantity"] == "loop"


def test_existing_output_needs_resume(lot, tmp_path):
    files = find_sweeps(lot)[:2]
    out = tmp_path / "r.csv"
    run_lot(files, TaskSettings(), out, workers=1, progress=None)
    with pytest.raises(InputError, match="--resume"):
        run_lot(files, TaskSettings(), out, workers=1, progress=None)
    # resuming a finished lot runs nothing and changes nothing
    before = out.read_text()
    info = run_lot(files, TaskSettings(), out, workers=1, resume=True, progress=None)
    assert info.ran == 0 and info.resumed == 2 and out.read_text() == before
    # other columns (a new --param) cannot be appended to the same table
    with pytest.raises(InputError, match="columns"):
        run_lot(files, TaskSettings(params=("k",)), out, workers=1, resume=True, progress=None)


def _cli(*args):
    return [sys.executable, "-m", "benchfit", "batch", *map(str, args)]


def test_resume_after_kill_has_no_duplicate_and_no_missing_rows(tmp_path):
    lot = tmp_path / "lot"
    files = make_lot(lot, 80, quantity="loop", seed=5)
    out = tmp_path / "r.csv"
    env = dict(os.environ, OPENBLAS_NUM_THREADS="1")
    proc = subprocess.Popen(_cli(lot, "-o", out, "--workers", 1, "--quiet"), env=env,
                            stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    deadline = time.monotonic() + 60
    rows_seen = 0
    while time.monotonic() < deadline and proc.poll() is None:
        if out.exists():
            rows_seen = out.read_text().count("\n") - 1
            if rows_seen >= 5:
                break
        time.sleep(0.005)
    proc.send_signal(signal.SIGKILL)
    proc.wait()
    assert proc.returncode == -signal.SIGKILL, "the lot finished before it could be killed"
    done_before = read_table(out)[1]
    assert 5 <= len(done_before) < 80
    # a write torn by the kill: half a line with no newline at the end
    with open(out, "a") as fh:
        fh.write(str(files[0]) + ",SN05-000")
    res = subprocess.run(_cli(lot, "-o", out, "--workers", 2, "--resume", "--json"), env=env,
                         capture_output=True, text=True, timeout=300)
    assert res.returncode == 0, res.stderr
    rows = read_table(out)[1]
    names = [r["file"] for r in rows]
    assert len(names) == len(set(names)) == 80
    assert sorted(names) == sorted(str(f) for f in files)
    # rows written before the kill are kept as they were
    assert rows[:len(done_before)] == done_before
    import json
    report = json.loads(res.stdout)
    assert report["run"]["resumed"] == len(done_before)
    assert report["run"]["ran"] == 80 - len(done_before)
    assert report["summary"]["total"] == 80


def _task_that_kills_its_worker(path, settings):
    # Stands in for a crash in native code or an out-of-memory kill on one bad file.
    if "killer" in os.path.basename(path):
        os._exit(1)
    return run_task(path, settings)


def test_a_file_that_kills_its_worker_gets_an_error_row_and_the_rest_real_rows(lot, tmp_path):
    from benchfit.batch.paths import pool_rows as _pool

    files = [str(p) for p in sorted(lot.glob("unit_*.csv"))[:6]]
    killer = tmp_path / "killer.csv"
    killer.write_bytes((lot / "unit_00000.csv").read_bytes())
    todo = files[:3] + [str(killer)] + files[3:]
    rows = {r["file"]: r for r in _pool(todo, TaskSettings(limits=LIMITS), 2,
                                         task=_task_that_kills_its_worker)}
    assert sorted(rows) == sorted(todo)
    assert rows[str(killer)]["status"] == "error"
    assert "worker failed" in rows[str(killer)]["error"]
    assert all(rows[f]["status"] == "pass" for f in files)


def test_dask_missing_is_a_clear_input_error(lot, tmp_path, monkeypatch):
    monkeypatch.setitem(sys.modules, "distributed", None)  # as if not installed
    with pytest.raises(InputError, match=r"benchfit\[cluster\]") as ei:
        run_lot(find_sweeps(lot)[:1], TaskSettings(), tmp_path / "r.csv", dask="tcp://127.0.0.1:8786",
                progress=None)
    assert ei.value.source == "--dask"


def test_lot_run_json_round_trip(lot, tmp_path):
    import json

    from benchfit.batch.runner import LotRun
    from benchfit.fileio import to_json_text

    info = run_lot(find_sweeps(lot)[:3], TaskSettings(limits=LIMITS), tmp_path / "r.csv", workers=1,
                   progress=None)
    back = LotRun.from_dict(json.loads(to_json_text(info)))
    assert back.to_dict() == info.to_dict()
    assert info.provenance.settings["limits"]["min_phase_margin_deg"] == 45.0


def test_dask_with_no_worker_left_times_out_naming_the_missing_sweeps(lot, tmp_path):
    # it used to wait for ever, silently, once the cluster had no worker
    distributed = pytest.importorskip("distributed")
    from benchfit.batch.runner import LotIncomplete

    files = find_sweeps(lot)[:5]
    with distributed.LocalCluster(processes=False, n_workers=0, dashboard_address=None) as cluster:
        t0 = time.monotonic()
        with pytest.raises(LotIncomplete) as ei:
            run_lot(files, TaskSettings(), tmp_path / "r.csv", dask=cluster.scheduler_address,
                    progress=None, worker_timeout_s=1.0)
        assert time.monotonic() - t0 < 30
    e = ei.value
    assert e.missing == files and e.written == 0 and e.exit_code == 2
    msg = str(e)
    assert "no Dask worker left for 1 s" in msg and "5 missing" in msg and "--resume" in msg
    assert os.path.basename(files[0]) in msg
    # the run that completes them
    info = run_lot(files, TaskSettings(), tmp_path / "r.csv", workers=1, resume=True, progress=None)
    assert info.ran == 5 and len(read_table(tmp_path / "r.csv")[1]) == 5


def test_ctrl_c_names_the_missing_sweeps_and_the_resume(tmp_path, capsys, monkeypatch):
    import benchfit.batch.runner as runner
    from benchfit.cli import main

    folder = tmp_path / "six"
    make_lot(folder, 6, quantity="loop", seed=7)
    files = find_sweeps(folder)
    real = runner.append_lines_durable
    rows = []

    def append(path, lines):
        real(path, lines)
        rows.append(lines)
        if len(rows) == 2:          # two rows written: Ctrl-C
            raise KeyboardInterrupt

    monkeypatch.setattr(runner, "append_lines_durable", append)
    out = tmp_path / "r.csv"
    argv = ["batch", str(folder), "-o", str(out), "--workers", "1", "--quiet"]
    assert main(argv) == 130
    err = capsys.readouterr().err
    assert err.startswith("benchfit: error: interrupted: 2 of 6 sweeps written") and err.count("\n") == 1
    assert "4 missing (" + os.path.basename(files[2]) in err, err
    assert "complete them with: benchfit batch " in err and err.rstrip().endswith("--resume")
    monkeypatch.undo()
    assert main([*argv, "--resume"]) == 0
    assert len(read_table(out)[1]) == 6


def test_workers_run_the_task_without_numpy_notes(monkeypatch, capsys):
    # a pool or Dask worker prints straight to its stderr: the task it runs drops them itself
    import warnings

    import benchfit.batch.paths as paths

    def noisy(path, settings):
        np.log10(np.zeros(2))
        return {"file": path}

    monkeypatch.setattr(paths, "run_task", noisy)
    with warnings.catch_warnings():
        warnings.simplefilter("error")               # any warning that escapes would raise here
        assert paths.quiet_task("x.csv", TaskSettings()) == {"file": "x.csv"}
    assert paths.pool_rows.__defaults__[-1] is paths.quiet_task


@pytest.mark.skipif(os.name != "posix", reason="process groups and SIGINT are POSIX")
def test_ctrl_c_to_a_pool_lot_is_one_line_and_resumes(tmp_path):
    # Ctrl-C reaches every process of the group: the pool's workers printed their own
    # KeyboardInterrupt tracebacks over the message
    lot = tmp_path / "lot"
    make_lot(lot, 120, quantity="loop", seed=9)
    out = tmp_path / "r.csv"
    env = dict(os.environ, OPENBLAS_NUM_THREADS="1")
    proc = subprocess.Popen(_cli(lot, "-o", out, "--workers", 2, "--quiet"), env=env, text=True,
                            stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, start_new_session=True)
    deadline = time.monotonic() + 120
    while time.monotonic() < deadline and proc.poll() is None:
        if out.exists() and out.read_text().count("\n") > 6:
            break
        time.sleep(0.02)
    os.killpg(proc.pid, signal.SIGINT)
    _, err = proc.communicate(timeout=120)
    assert proc.returncode == 130, err
    assert "Traceback" not in err and err.count("\n") == 1, err
    assert err.startswith("benchfit: error: interrupted: ") and err.rstrip().endswith("--resume")
    done = subprocess.run(_cli(lot, "-o", out, "--workers", 2, "--quiet", "--resume"), env=env,
                          capture_output=True, text=True, timeout=300)
    assert done.returncode == 0, done.stderr
    rows = read_table(out)[1]
    assert sorted(r["file"] for r in rows) == sorted(find_sweeps(lot))   # no gap, no duplicate
