"""inspect / convert / demo commands: output forms, exit codes, one-line errors."""

import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from benchfit.cli import main
from benchfit.data import read_canonical_sweep, read_canonical_trace, read_sweep

SAMPLES = Path(__file__).resolve().parents[1] / "sample_data"
BUCK = SAMPLES / "buck_plant.csv"


def test_inspect_text(capsys):
    assert main(["inspect", str(BUCK)]) == 0
    out = capsys.readouterr().out
    assert "401 points" in out and "semicolon" in out and "Gain (dB) -> mag" in out


def test_inspect_json_keys(capsys):
    assert main(["inspect", str(BUCK), "--json"]) == 0
    d = json.loads(capsys.readouterr().out)
    for key in ("points", "f_min_hz", "f_max_hz", "columns", "dialect", "warnings"):
        assert key in d
    assert d["points"] == 401 and d["f_min_hz"] == pytest.approx(10) and d["f_max_hz"] == pytest.approx(1e6)
    assert d["dialect"]["decimal"] == "," and d["warnings"] == []


def test_inspect_trace_file(capsys):
    assert main(["inspect", str(SAMPLES / "step_trace.csv"), "--json"]) == 0
    d = json.loads(capsys.readouterr().out)
    assert d["kind"] == "trace" and d["samples"] == 2000 and set(d["channels"]) == {"CH1", "CH2"}


def test_inspect_override_flags(tmp_path, capsys):
    p = tmp_path / "raw.txt"
    p.write_text("1 2 0.5\n2 1 1.0\n3 0.5 1.5\n")
    assert main(["inspect", str(p), "--columns", "freq,mag,phase", "--freq-unit", "kHz",
                 "--mag-db", "--phase-deg", "--quantity", "loop", "--json"]) == 0
    d = json.loads(capsys.readouterr().out)
    assert d["f_min_hz"] == 1000 and d["quantity"] == "loop"
    assert d["dialect"]["mag_form"] == "db" and d["dialect"]["phase_form"] == "deg"


def test_inspect_trace_choice_and_param(capsys):
    assert main(["inspect", str(SAMPLES / "dialects" / "two_loads.csv"), "--trace", "light", "--json"]) == 0
    assert json.loads(capsys.readouterr().out)["dialect"]["trace_label"] == "light"
    assert main(["inspect", str(SAMPLES / "opamp_buffer.s2p"), "--param", "S11", "--json"]) == 0
    assert json.loads(capsys.readouterr().out)["dialect"]["parameter"] == "S11"


def test_convert_writes_canonical(tmp_path, capsys):
    out = tmp_path / "sub" / "plant.csv"
    assert main(["convert", str(BUCK), "-o", str(out), "--quantity", "plant"]) == 0
    back = read_canonical_sweep(out)
    ref = read_sweep(BUCK)
    np.testing.assert_allclose(back.response, ref.response, rtol=1e-12)
    assert back.quantity == "plant"
    assert not list(out.parent.glob(".*.tmp"))  # atomic: no temp file left behind
    trace_out = tmp_path / "step.csv"
    assert main(["convert", str(SAMPLES / "step_trace.csv"), "-o", str(trace_out)]) == 0
    assert read_canonical_trace(trace_out).names == ["CH1", "CH2"]


def test_convert_bad_file_writes_nothing(tmp_path, capsys):
    bad = tmp_path / "bad.csv"
    bad.write_text("Frequency (Hz),Gain (dB),Phase (deg)\n10,1,0\n20,x,0\n")
    out = tmp_path / "out.csv"
    assert main(["convert", str(bad), "-o", str(out)]) == 2
    err = capsys.readouterr().err
    assert err.startswith("benchfit: error: ") and "line 3" in err and err.count("\n") == 1
    assert not out.exists()


@pytest.mark.parametrize("args,needle", [
    (["inspect", "no/such/file.csv"], "file not found"),
    (["inspect", str(BUCK), "--freq-unit", "furlong"], "--freq-unit"),
    (["inspect", str(BUCK), "--columns", "freq,colour"], "--columns"),
    (["inspect", str(BUCK), "--mag-db", "--mag-linear"], "not allowed with"),
    (["convert", str(BUCK)], "required"),
])
def test_errors_are_one_line_exit_2(args, needle):
    r = subprocess.run([sys.executable, "-m", "benchfit", *args], capture_output=True, text=True)
    assert r.returncode == 2
    assert r.stderr.startswith("benchfit: error:") and needle in r.stderr
    assert r.stderr.count("\n") == 1 and "Traceback" not in r.stderr


def test_demo_reads_every_sample(capsys):
    assert main(["demo", "--json"]) == 0
    d = json.loads(capsys.readouterr().out)
    assert d["failed"] == 0 and d["read"] == len(d["files"]) >= 11
    names = {f["file"] for f in d["files"]}
    assert {"buck_plant.csv", "ldo_loop.csv", "opamp_buffer.s2p", "buck_zout.csv", "step_trace.csv",
            "load_step_trace.csv"} <= names


def test_demo_other_folder(tmp_path, capsys):
    (tmp_path / "x.csv").write_text("freq_hz,re,im\n1,1,0\n2,1,0\n")
    (tmp_path / "bad.csv").write_text("nothing here\n")
    assert main(["demo", "--data", str(tmp_path)]) == 1
    out = capsys.readouterr().out
    assert "1 of 2 files read" in out
    assert main(["demo", "--data", str(tmp_path / "none")]) == 2


def test_headerless_table_stays_a_sweep_error(tmp_path, capsys):
    # an evenly rising first column without names must not be taken for a scope trace
    p = tmp_path / "raw.csv"
    p.write_text("1,2,3\n2,3,4\n3,4,5\n")
    assert main(["inspect", str(p)]) == 2
    assert "no header line" in capsys.readouterr().err


def test_inspect_of_ordinary_files_needs_no_pandas():
    # numpy converts a block below PANDAS_MIN_CELLS; pandas' 0.37 s import is not paid
    files = [BUCK, SAMPLES / "opamp_buffer.s2p", SAMPLES / "step_trace.csv",
             *sorted((SAMPLES / "dialects").iterdir())]
    code = ("import sys, io, contextlib\nfrom benchfit.cli import main\n"
            f"for f in {[str(f) for f in files]!r}:\n"
            "    with contextlib.redirect_stdout(io.StringIO()), contextlib.redirect_stderr(io.StringIO()):\n"
            "        assert main(['inspect', f]) == 0, f\n"
            "print('pandas' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "False", out.stdout + out.stderr


def test_numpy_and_pandas_conversions_read_the_same_numbers(monkeypatch):
    # reference: pandas' C parser (read_csv) on the same rows; every sample file and dialect
    # is read once through each path, and the responses must be identical to the last bit
    import benchfit.data.rowparse as rowparse
    import benchfit.data.touchstone as touchstone

    files = [BUCK, SAMPLES / "ldo_loop.csv", SAMPLES / "opamp_buffer.s2p",
             *sorted((SAMPLES / "dialects").iterdir())]
    got = {}
    for cells in (10**12, 0):
        monkeypatch.setattr(rowparse, "PANDAS_MIN_CELLS", cells)
        monkeypatch.setattr(touchstone, "PANDAS_MIN_CELLS", cells)
        got[cells] = [read_sweep(f, trace=1 if "two_loads" in f.name or "stacked" in f.name else None)
                      for f in files]
    for a, b in zip(got[10**12], got[0], strict=True):
        assert np.array_equal(a.freq_hz, b.freq_hz) and np.array_equal(a.response, b.response)
