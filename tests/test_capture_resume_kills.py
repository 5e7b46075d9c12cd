"""A capture killed at ANY write boundary resumes correctly and never loses an acknowledged row.

Every fsync and every rename a capture makes (header, manifest, each appended segment, the
final header rewrite, the final manifest) is a boundary.  At each one the capture is killed
in-process three ways: before the call, just after it, and (for the output file's own fsync)
with the last bytes of the append torn off, as a crash of the machine could leave them.  Then
``--resume`` must finish the sweep with no duplicate and no gap (the reference is the grid of
a capture with no fault), keep every row the manifest acknowledged byte for byte, and a
second resume must change nothing.  The process-level version (SIGKILL of the real command)
is in tests/test_capture_faults.py.
"""

import dataclasses
import os

import numpy as np
import pytest

from benchfit.bench.capture import CaptureSettings, manifest_path, run_capture, scan_capture_file
from benchfit.bench.profile import find_profile
from benchfit.bench.sim_transport import simulated_session
from benchfit.bench.simulator import SimulatedAnalyzer
from benchfit.data.canonical import read_canonical_sweep
from benchfit.errors import InputError
from benchfit.fileio import read_json

SETTINGS = CaptureSettings(10, 1e5, 9, segment_points=3)   # 3 native sweeps


class Killed(BaseException):
    """Stands for SIGKILL: nothing in benchfit catches it."""


def plant(f):
    # H = 10 / (1 + j f / 1 kHz), first-order low-pass (textbook formula)
    return 10.0 / (1.0 + 1j * np.asarray(f, dtype=float) / 1e3)


def _profile():
    return dataclasses.replace(find_profile("generic-analyzer"), timeout_s=0.5, retries=1,
                               complete_timeout_s=None)


def _capture(tmp_path, out, *, resume=False):
    inst = SimulatedAnalyzer(plant, noise=1e-3)
    with simulated_session(inst, _profile(), transport="sim", folder=tmp_path / "sim") as s:
        return run_capture(s, SETTINGS, out, resume=resume)


class Killer:
    """Counts fsync and rename calls; at call number ``at`` kills the capture (``mode``)."""

    def __init__(self, monkeypatch, out, at, mode):
        self.out, self.at, self.mode, self.n = os.path.realpath(out), at, mode, 0
        self.fired = False
        real_fsync, real_replace = os.fsync, os.replace

        def fsync(fd):
            self._event("fsync", lambda: real_fsync(fd), fd=fd)

        def replace(src, dst):
            self._event("rename", lambda: real_replace(src, dst))

        monkeypatch.setattr(os, "fsync", fsync)
        monkeypatch.setattr(os, "replace", replace)

    def _event(self, kind, call, fd=None):
        n, self.n = self.n, self.n + 1
        if n != self.at or self.fired:
            return call()
        self.fired = True
        if self.mode == "before":
            raise Killed
        if self.mode == "torn":
            own = fd is not None and os.path.realpath(f"/proc/self/fd/{fd}") == self.out
            size = os.fstat(fd).st_size if fd is not None else 0
            if own and size > 8:
                os.ftruncate(fd, size - 7)   # the last bytes of the append never reached disk
            raise Killed
        call()
        raise Killed


def _acknowledged(out):
    """The row lines the manifest acknowledged, as bytes (none without a manifest)."""
    if not manifest_path(out).exists() or not out.exists():
        return []
    n = read_json(manifest_path(out))["rows"]
    scan = scan_capture_file(out)
    data = out.read_bytes()
    starts = (scan.header_end, *scan.row_ends[:-1])
    return [data[a:b] for a, b in zip(starts[:n], scan.row_ends[:n], strict=True)]


def _boundaries(tmp_path, monkeypatch):
    out = tmp_path / "count.csv"
    k = Killer(monkeypatch, out, at=-1, mode="before")
    _capture(tmp_path, out)
    monkeypatch.undo()
    return k.n, read_canonical_sweep(out).freq_hz


@pytest.mark.skipif(not os.path.exists("/proc/self/fd"), reason="needs /proc to name an fd")
def test_kill_at_every_write_boundary_then_resume(tmp_path, monkeypatch):
    events, grid = _boundaries(tmp_path, monkeypatch)
    assert events >= 20   # header, manifest, 3 x (append + manifest), final rewrite, manifest
    tried = 0
    for at in range(events):
        for mode in ("before", "after", "torn"):
            out = tmp_path / f"k{at}-{mode}.csv"
            with monkeypatch.context() as mp:
                Killer(mp, out, at, mode)
                with pytest.raises(Killed):
                    _capture(tmp_path, out)
            acked = _acknowledged(out)
            if not out.exists():       # killed before the file's first rename: start afresh
                result = _capture(tmp_path, out)
            else:
                result = _capture(tmp_path, out, resume=True)
            where = f"killed {mode} write boundary {at}"
            assert result.complete, where
            resp = read_canonical_sweep(out)
            np.testing.assert_array_equal(resp.freq_hz, grid, err_msg=where)  # no gap, no duplicate
            assert resp.meta["complete"] is True, where
            assert _acknowledged(out)[: len(acked)] == acked, where           # nothing saved lost
            assert read_json(manifest_path(out))["complete"] is True, where
            before = out.read_bytes()
            again = _capture(tmp_path, out, resume=True)
            assert again.complete and out.read_bytes() == before, where
            tried += 1
    assert tried == 3 * events


def test_kill_after_final_header_rewrite_keeps_every_row(tmp_path, monkeypatch):
    """The case of the issue: killed after the end-of-capture header rewrite, before the
    manifest update.  The old rule cut the file to the manifest's byte count (the header had
    grown, so the last rows went) and a second resume reported success over a broken file."""
    events, grid = _boundaries(tmp_path, monkeypatch)
    out = tmp_path / "final.csv"
    with monkeypatch.context() as mp:   # the last rename before the final manifest's
        Killer(mp, out, events - 3, "after")
        with pytest.raises(Killed):
            _capture(tmp_path, out)
    assert scan_capture_file(out).meta["complete"] is True
    assert read_json(manifest_path(out))["complete"] is False
    rows_before = out.read_bytes()
    result = _capture(tmp_path, out, resume=True)
    assert result.complete and not result.warnings
    assert out.read_bytes() == rows_before                       # nothing cut, nothing measured
    np.testing.assert_array_equal(read_canonical_sweep(out).freq_hz, grid)


def test_kill_before_first_manifest_resumes_or_starts_again(tmp_path, monkeypatch):
    """Killed between the header's rename and the first manifest: no row was measured, so
    both --resume and a fresh start (without --resume) proceed instead of refusing."""
    for resume in (True, False):
        out = tmp_path / f"first-{resume}.csv"
        with monkeypatch.context() as mp:
            Killer(mp, out, 1, "after")          # event 0: fsync of the header, 1: its rename
            with pytest.raises(Killed):
                _capture(tmp_path, out)
        assert out.exists() and not manifest_path(out).exists()
        assert _capture(tmp_path, out, resume=resume).complete


def test_resume_refuses_a_file_with_fewer_rows_than_saved_and_cuts_nothing(tmp_path):
    out = tmp_path / "changed.csv"
    _capture(tmp_path, out)
    m = read_json(manifest_path(out))
    m.update(complete=False)
    manifest_path(out).write_text(__import__("json").dumps(m))
    text = out.read_text().replace('"complete": true', '"complete": false')
    lines = text.splitlines(keepends=True)
    out.write_text("".join(lines[:-2]))        # two acknowledged rows gone
    before = out.read_bytes()
    with pytest.raises(InputError, match="nothing was cut"):
        _capture(tmp_path, out, resume=True)
    assert out.read_bytes() == before
