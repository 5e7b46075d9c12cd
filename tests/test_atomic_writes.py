"""Outputs are written atomically: a process killed mid-write leaves the old file or the new one.

The property follows POSIX rename(2) atomicity; the test kills a writer with
SIGKILL at many moments and checks the target is always one complete version.
"""

import json
import os
import signal
import subprocess
import sys
import time

import pytest

from benchfit.fileio import append_lines_durable, read_json, write_json_atomic

WRITER = r"""
import sys
from benchfit.fileio import write_json_atomic
path = sys.argv[1]
i = 0
while True:
    i += 1
    # big enough that a write takes several system calls
    write_json_atomic(path, {"version": i, "payload": list(range(20000))})
"""


@pytest.mark.skipif(os.name != "posix", reason="SIGKILL semantics are POSIX")
def test_kill_during_atomic_write_leaves_a_complete_file(tmp_path):
    target = tmp_path / "design.json"
    write_json_atomic(target, {"version": 0, "payload": []})
    for delay in (0.05, 0.11, 0.17, 0.23, 0.31):
        proc = subprocess.Popen([sys.executable, "-c", WRITER, str(target)])
        time.sleep(delay)
        proc.send_signal(signal.SIGKILL)
        proc.wait()
        d = read_json(target)  # must parse: never half a file
        assert isinstance(d["version"], int)
        assert d["payload"] in ([], list(range(20000)))
    leftovers = [p.name for p in tmp_path.iterdir() if p.name != "design.json"]
    # temporary files of a killed writer may remain, but never under the target's name
    assert all(n.startswith(".design.json.") and n.endswith(".tmp") for n in leftovers)


def test_append_lines_durable(tmp_path):
    p = tmp_path / "rows.csv"
    append_lines_durable(p, ["a,b", "1,2"])
    append_lines_durable(p, ["3,4\n"])
    assert p.read_text().splitlines() == ["a,b", "1,2", "3,4"]


def test_json_nonfinite_round_trip(tmp_path):
    from benchfit.fileio import as_float

    write_json_atomic(tmp_path / "x.json", {"gm": float("inf"), "pm": float("nan")})
    d = json.loads((tmp_path / "x.json").read_text())
    assert d == {"gm": "inf", "pm": None}
    assert as_float(d["gm"]) == float("inf")


def test_atomic_write_has_ordinary_file_mode(tmp_path):
    # A report or result table must be readable by colleagues like any file open() creates.
    mask = os.umask(0)
    os.umask(mask)
    write_json_atomic(tmp_path / "r.json", {"a": 1})
    assert (tmp_path / "r.json").stat().st_mode & 0o777 == 0o666 & ~mask
