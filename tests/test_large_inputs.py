"""Large inputs: a 1 000 000-line sweep is read with bounded memory; a 10 000 000-sample
trace is refused with a clear message, before it is loaded (limits in benchfit/data/limits.py,
documented in docs/reading-data.md).

Each read runs in a child process, which reports its peak resident memory
(getrusage ru_maxrss, kB on Linux) before and after the read.
"""

import json
import subprocess
import sys

import numpy as np
import pytest

from benchfit.data.limits import MAX_LINES

CHILD = r"""
import json, resource, sys
from benchfit.data import read_sweep, read_trace
from benchfit.errors import InputError
before = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
out = {}
try:
    r = (read_sweep if sys.argv[1] == "sweep" else read_trace)(sys.argv[2])
    out["points"] = len(r) if sys.argv[1] == "sweep" else int(r.time_s.size)
    if sys.argv[1] == "sweep":
        out["f_first"], out["f_last"] = float(r.freq_hz[0]), float(r.freq_hz[-1])
except InputError as e:
    out["error"] = str(e)
out["peak_mb"] = (resource.getrusage(resource.RUSAGE_SELF).ru_maxrss - before) / 1024
print(json.dumps(out))
"""


def _read(kind, path):
    run = subprocess.run([sys.executable, "-c", CHILD, kind, str(path)], capture_output=True,
                         text=True, timeout=900)
    assert run.returncode == 0, run.stderr
    return json.loads(run.stdout)


@pytest.mark.skipif(sys.platform != "linux", reason="ru_maxrss is in kB on Linux")
def test_million_line_sweep_is_read_with_bounded_memory(tmp_path):
    n = 1_000_000
    f = np.logspace(1, 7, n)
    p = tmp_path / "big_sweep.csv"
    with open(p, "w", encoding="utf-8") as fh:
        fh.write("Frequency (Hz),Gain (dB),Phase (deg)\n")
        np.savetxt(fh, np.column_stack([f, -20 * np.log10(f / 1e3), np.full(n, -90.0)]),
                   delimiter=",", fmt="%.9g")
    size_mb = p.stat().st_size / 2**20
    out = _read("sweep", p)
    assert out.get("points") == n, out
    assert out["f_first"] == pytest.approx(10.0) and out["f_last"] == pytest.approx(1e7)
    # measured 330-400 MB above the imports for this 25 MB file (13-16 x the file);
    # the bound leaves room for allocator noise but catches a copy per cell or per line.
    assert out["peak_mb"] < 25 * size_mb, out


@pytest.mark.skipif(sys.platform != "linux", reason="ru_maxrss is in kB on Linux")
def test_ten_million_sample_trace_is_refused_before_loading(tmp_path):
    n = 10_000_000
    p = tmp_path / "long_record.csv"
    k = np.arange(n)
    with open(p, "w", encoding="utf-8") as fh:
        fh.write("Time (ns),CH1 (V)\n")
        for chunk in np.array_split(k, 20):  # a 1 MHz sine sampled every 1 ns
            fh.write("".join(f"{i},{v:.4f}\n" for i, v in zip(
                chunk.tolist(), np.sin(2e-3 * np.pi * chunk).tolist(), strict=True)))
    out = _read("trace", p)
    assert "error" in out, out
    msg = out["error"]
    assert "long_record.csv" in msg and f"{MAX_LINES:,} lines" in msg and "BENCHFIT_MAX_LINES" in msg
    assert out["peak_mb"] < 50, out  # the line count streams; nothing was loaded


def test_limits_can_be_raised_and_lowered(tmp_path, monkeypatch):
    from benchfit.data import read_sweep
    from benchfit.errors import InputError

    p = tmp_path / "s.csv"
    p.write_text("Frequency (Hz),Gain (dB),Phase (deg)\n" + "".join(f"{10 * (i + 1)},-1,-90\n"
                                                                    for i in range(50)))
    monkeypatch.setenv("BENCHFIT_MAX_LINES", "20")
    with pytest.raises(InputError, match="more than 20 lines"):
        read_sweep(p)
    monkeypatch.setenv("BENCHFIT_MAX_LINES", "100")
    assert len(read_sweep(p)) == 50
    monkeypatch.setenv("BENCHFIT_MAX_MB", "0.0001")
    with pytest.raises(InputError, match="BENCHFIT_MAX_MB"):
        read_sweep(p)
    monkeypatch.setenv("BENCHFIT_MAX_MB", "lots")
    with pytest.raises(InputError, match="BENCHFIT_MAX_MB"):
        read_sweep(p)
