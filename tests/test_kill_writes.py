"""Killing benchfit while it writes an output leaves the old file intact or the new one complete.

Each kind of output is written by the real command (`benchfit fit -o`, `design -o`,
`report -o`, `convert -o`, `export-spice -o`, `predict -o`, `batch --summary`) in a
child process that SIGKILLs itself at a chosen moment of writing the target: half
of the bytes in the temporary file, after the data but before the rename, and just
after the rename.  POSIX rename(2) is atomic, so the target must be the old bytes
in the first two cases and a complete new file in the third.  Captures and batch
result rows (appended, fsync'd) have their own kill tests in
tests/test_capture_faults.py and tests/test_batch_runner.py.
"""

import json
import os
import signal
import subprocess
import sys

import numpy as np
import pytest
from scenario_plants import buck_plant

from benchfit.data import read_sweep
from benchfit.loop.design import design
from benchfit.loop.loopgain import LoopPlant
from benchfit.loop.sensing import Sensing
from benchfit.loop.synthesis import Targets

pytestmark = pytest.mark.skipif(os.name != "posix", reason="SIGKILL and rename semantics are POSIX")

# Runs in the child: patch the atomic writer's system calls so that the process kills
# itself at MOMENT while writing TARGET (other files are written normally), then run
# the command.
CHILD = r"""
import os, signal, sys, tempfile
import benchfit.fileio as fio

target, moment, argv = sys.argv[1], sys.argv[2], sys.argv[3:]
name = os.path.basename(target)
state = {"ours": None}
real_mkstemp, real_fdopen, real_fsync, real_replace = tempfile.mkstemp, os.fdopen, os.fsync, os.replace

def die():
    os.kill(os.getpid(), signal.SIGKILL)

def mkstemp(*a, prefix="", **k):
    fd, tmp = real_mkstemp(*a, prefix=prefix, **k)
    state["ours"] = fd if prefix == f".{name}." else None
    return fd, tmp

class HalfWriter:
    def __init__(self, fh):
        self.fh = fh
    def write(self, data):
        self.fh.write(data[: len(data) // 2])
        self.fh.flush()
        os.fsync(self.fh.fileno())
        die()
    def __getattr__(self, k):
        return getattr(self.fh, k)
    def __enter__(self):
        return self
    def __exit__(self, *exc):
        return self.fh.__exit__(*exc)

def fdopen(fd, *a, **k):
    fh = real_fdopen(fd, *a, **k)
    return HalfWriter(fh) if moment == "mid-write" and fd == state["ours"] else fh

def replace(src, dst):
    ours = os.path.basename(str(dst)) == name
    if ours and moment == "before-rename":
        die()
    real_replace(src, dst)
    if ours and moment == "after-rename":
        die()

fio.tempfile.mkstemp = mkstemp
fio.os.fdopen = fdopen
fio.os.replace = replace
from benchfit.cli import main
sys.exit(main(argv))
"""

OLD = b"old contents that must survive\n"


@pytest.fixture(scope="module")
def inputs(tmp_path_factory):
    d = tmp_path_factory.mktemp("kill_inputs")
    f = np.logspace(1, 6, 150)
    h = buck_plant().response(f)
    (d / "sweep.csv").write_text("Frequency (Hz),Gain (dB),Phase (deg)\n" + "".join(
        f"{x:.9g},{20 * np.log10(abs(v)):.6f},{np.degrees(np.angle(v)):.5f}\n" for x, v in zip(f, h, strict=True)))
    (d / "lot").mkdir()
    (d / "lot" / "unit1.csv").write_bytes((d / "sweep.csv").read_bytes())
    buck_plant().to_json(d / "model.json")
    design(LoopPlant(buck_plant(), Sensing.divider(30e3, 10e3), name="buck", band_hz=(10, 1e6)), "type3",
           Targets(20e3, 55, 10), draws=0).to_json(d / "design.json")
    return d


def _json_kind(kind):
    def check(path):
        d = json.loads(path.read_text(encoding="utf-8"))
        assert d.get("kind") == kind if kind else isinstance(d, dict)
    return check


def _html(path):
    text = path.read_text(encoding="utf-8")
    assert text.rstrip().endswith("</html>") and "<html" in text


def _netlist(path):
    text = path.read_text(encoding="utf-8")
    assert ".SUBCKT" in text.upper() and ".ENDS" in text.upper()


def _sweep(path):
    assert len(read_sweep(path)) == 150


def _curve(path):
    text = path.read_text(encoding="utf-8")
    rows = [r.split(",") for r in text.splitlines() if not r.startswith("#")]
    assert rows[0][0] == "freq_hz" and len(rows) > 10 and text.endswith("\n")
    assert all(len(r) == len(rows[0]) for r in rows)


# kind -> (output name, command with {out} and {in}, check of a complete new file)
KINDS = {
    "fit result": ("plant.json", "fit {in}/sweep.csv --order 3 --delay none -o {out}", _json_kind("fit_result")),
    "design": ("design.json", "design {in}/model.json --network type2 --draws 0 -o {out}", _json_kind("design")),
    "report": ("report.html", "report {in}/design.json -o {out}", _html),
    "canonical CSV (convert)": ("canon.csv", "convert {in}/sweep.csv -o {out}", _sweep),
    "SPICE netlist": ("plant.cir", "export-spice {in}/model.json -o {out}", _netlist),
    "predicted curve": ("loop.csv", "predict {in}/design.json --curve loop -o {out}", _curve),
    "batch summary": ("summary.json", "batch {in}/lot --workers 1 -o {tmp}/rows.csv --summary {out} --quiet",
                      _json_kind(None)),
}


@pytest.mark.parametrize("moment", ["mid-write", "before-rename", "after-rename"])
@pytest.mark.parametrize("kind", sorted(KINDS))
def test_kill_during_write(inputs, tmp_path, kind, moment):
    name, cmd, complete = KINDS[kind]
    out = tmp_path / name
    out.write_bytes(OLD)
    argv = cmd.format(out=out, tmp=tmp_path, **{"in": inputs}).split()
    proc = subprocess.run([sys.executable, "-c", CHILD, str(out), moment, *argv],
                          capture_output=True, text=True, timeout=600)
    assert proc.returncode == -signal.SIGKILL, f"not killed while writing {name}: {proc.stderr}"
    if moment == "after-rename":
        assert out.read_bytes() != OLD
        complete(out)
    else:
        assert out.read_bytes() == OLD, "the old file was damaged"
    # a killed writer may leave its temporary file, never a file under another name
    stray = [p.name for p in tmp_path.iterdir() if p.name not in (name, "rows.csv")]
    assert all(s.startswith(f".{name}.") and s.endswith(".tmp") for s in stray), stray
