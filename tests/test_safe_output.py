"""Every writer goes through one safe-output helper (benchfit.fileio.check_output_path).

* An output onto anything that is not a regular file (a device, a named pipe, a folder) is
  refused with one line naming it; the special file is left as it was.  (As root, the atomic
  rename used to replace `-o /dev/full` with a JSON file.)  Device nodes are made inside the
  test folder, never the system's own.
* A full disk while writing (`fit -o`, `report -o`, a capture's append) is one line, exit 2,
  and the old output survives.
"""

import errno
import os
import stat
from pathlib import Path

import numpy as np
import pytest

from benchfit.cli import main
from benchfit.data import FrequencyResponse, write_sweep_csv
from benchfit.data.canonical import read_canonical_sweep
from benchfit.errors import InputError
from benchfit.fileio import append_lines_durable, check_output_path, write_text_atomic

SAMPLE = Path(__file__).resolve().parents[1] / "sample_data" / "buck_plant.csv"


def _special_files(tmp_path):
    fifo = tmp_path / "pipe"
    os.mkfifo(fifo)
    out = {"a named pipe": fifo, "a folder": tmp_path / "folder"}
    out["a folder"].mkdir()
    if os.geteuid() == 0:  # a character device with /dev/null's numbers, inside the test folder
        dev = tmp_path / "null"
        os.mknod(dev, 0o666 | stat.S_IFCHR, os.makedev(1, 3))
        out["a character device"] = dev
    link = tmp_path / "link"
    link.symlink_to(fifo)   # judged by what it points to
    out["a named pipe (through a link)"] = link
    return out


@pytest.mark.skipif(os.name != "posix", reason="named pipes and device nodes are POSIX")
def test_outputs_onto_special_files_are_refused(tmp_path):
    for kind, path in _special_files(tmp_path).items():
        before = os.lstat(path)
        for write in (lambda p: write_text_atomic(p, "x"), lambda p: append_lines_durable(p, ["x"]),
                      check_output_path):
            with pytest.raises(InputError, match=str(path)) as e:
                write(path)
            assert kind.split(" (")[0] in str(e.value), (kind, str(e.value))
        after = os.lstat(path)
        assert (after.st_mode, after.st_ino) == (before.st_mode, before.st_ino), kind


@pytest.mark.skipif(os.name != "posix", reason="named pipes are POSIX")
@pytest.mark.parametrize("command", [
    ["convert", str(SAMPLE), "-o", "{out}"],
    ["fit", str(SAMPLE), "--order", "2", "--delay", "none", "-o", "{out}"],
    ["capture", "--simulate", str(SAMPLE), "--points", "5", "--no-progress", "-o", "{out}"],
])
def test_cli_refuses_a_special_output_with_one_line(tmp_path, capsys, command):
    fifo = tmp_path / "pipe"
    os.mkfifo(fifo)
    rc = main([a.replace("{out}", str(fifo)) for a in command])
    err = capsys.readouterr().err
    assert rc == 2 and err.count("\n") == 1 and "is a named pipe, not a regular file" in err, err
    assert stat.S_ISFIFO(os.lstat(fifo).st_mode)


def _one_error(err):
    errors = [ln for ln in err.splitlines() if ln.startswith("benchfit: error: ")]
    return len(errors) == 1 and "Traceback" not in err


def _disk_full(monkeypatch, name):
    """Writing any file whose name contains ``name`` fails as a full disk does (at fsync)."""
    real = os.fsync

    def fsync(fd):
        if name in os.path.basename(os.path.realpath(f"/proc/self/fd/{fd}")):
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
        return real(fd)

    monkeypatch.setattr(os, "fsync", fsync)


needs_proc = pytest.mark.skipif(not os.path.exists("/proc/self/fd"), reason="needs /proc")


@needs_proc
def test_fit_output_on_a_full_disk(tmp_path, capsys, monkeypatch):
    out = tmp_path / "plant.json"
    out.write_text('{"old": true}\n')
    _disk_full(monkeypatch, "plant.json")
    rc = main(["fit", str(SAMPLE), "--order", "2", "--delay", "none", "-o", str(out)])
    err = capsys.readouterr().err
    assert rc == 2 and _one_error(err), err   # (the fit's own warnings come first)
    assert "cannot write: No space left on device; the old file is unchanged" in err
    assert out.read_text() == '{"old": true}\n'
    assert [p.name for p in tmp_path.iterdir()] == ["plant.json"]   # no temporary file left


@needs_proc
def test_report_output_on_a_full_disk(tmp_path, capsys, monkeypatch):
    from scenario_plants import buck_plant

    from benchfit.loop.design import design
    from benchfit.loop.loopgain import LoopPlant
    from benchfit.loop.sensing import Sensing
    from benchfit.loop.synthesis import Targets

    d = tmp_path / "design.json"
    design(LoopPlant(buck_plant(), Sensing.divider(30e3, 10e3), name="buck", band_hz=(10, 1e6)),
           "type3", Targets(20e3, 55, 10), draws=0).to_json(d)
    out = tmp_path / "report.html"
    out.write_text("old report")
    _disk_full(monkeypatch, "report.html")
    rc = main(["report", str(d), "-o", str(out)])
    err = capsys.readouterr().err
    assert rc == 2 and _one_error(err) and "No space left on device" in err, err
    assert out.read_text() == "old report"


@needs_proc
def test_capture_on_a_full_disk_keeps_what_was_saved(tmp_path, capsys, monkeypatch):
    f = np.geomspace(10, 1e5, 40)
    src = tmp_path / "plant.csv"
    write_sweep_csv(FrequencyResponse(freq_hz=f, response=10 / (1 + 1j * f / 1e3)), src)
    out = tmp_path / "cap.csv"
    argv = ["capture", "--simulate", str(src), "--points", "12", "--segment-points", "4",
            "--no-progress", "--transport", "sim", "-o", str(out)]
    real = os.fsync
    calls = {"n": 0}

    def fsync(fd):   # the second append of rows to cap.csv meets a full disk
        if os.path.realpath(f"/proc/self/fd/{fd}") == str(out.resolve()):
            calls["n"] += 1
            if calls["n"] == 2:
                raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
        return real(fd)

    monkeypatch.setattr(os, "fsync", fsync)
    rc = main(argv)
    err = capsys.readouterr().err
    assert rc == 2 and _one_error(err), err
    assert "No space left on device" in err and "4 of 12 points are saved" in err and "--resume" in err
    monkeypatch.setattr(os, "fsync", real)
    assert main([*argv, "--resume"]) == 0
    assert read_canonical_sweep(out).freq_hz.size == 12
