"""docs/errors.md is executable: every row's command is run through the CLI.

For each table row whose command starts with `benchfit`, the command runs in a
scratch folder holding the example files built below; the row's message
fragment must appear in the output, the exit status must match, and no Python
traceback may be printed.
"""

import os
import re
import shlex
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from scenario_plants import buck_plant

from benchfit.data import FrequencyResponse, TimeTrace, write_sweep_csv, write_trace_csv
from benchfit.loop.design import design
from benchfit.loop.loopgain import LoopPlant
from benchfit.loop.sensing import Sensing
from benchfit.loop.synthesis import Targets

DOC = Path(__file__).resolve().parents[1] / "docs" / "errors.md"
HEAD = "Frequency (Hz),Gain (dB),Phase (deg)\n"


def _rows():
    rows = []
    for line in DOC.read_text(encoding="utf-8").splitlines():
        cells = [c.strip() for c in re.split(r"(?<!\\)\|", line.strip())[1:-1]]
        if len(cells) != 5 or not cells[1].startswith("`benchfit") and "benchfit " not in cells[1]:
            continue
        command, says, code = cells[1].strip("`"), cells[2], cells[3]
        fragment = re.fullmatch(r"`(.+)`", says)
        assert fragment, f"message cell must be one `fragment`: {line}"
        rows.append(pytest.param(command, fragment.group(1), int(code), id=cells[0][:60]))
    return rows


@pytest.fixture(scope="module")
def scratch(tmp_path_factory):
    """The example files the commands in docs/errors.md name."""
    d = tmp_path_factory.mktemp("errors_table")
    f = np.logspace(1, 6, 200)
    m = buck_plant()
    rng = np.random.default_rng(3)
    noisy = m.response(f) * (1 + 0.01 * rng.standard_normal(f.size))
    # an analyzer export (not benchfit's own CSV): frequency, dB, degrees
    (d / "sweep.csv").write_text(HEAD + "".join(
        f"{x:.6g},{20 * np.log10(abs(h)):.4f},{np.degrees(np.angle(h)):.3f}\n" for x, h in zip(f, noisy, strict=True)))
    (d / "folder").mkdir()
    if hasattr(os, "mkfifo"):
        os.mkfifo(d / "pipe")   # a special file where an output belongs
    (d / "lot").mkdir()
    write_sweep_csv(FrequencyResponse(freq_hz=f, response=noisy), d / "lot" / "unit1.csv")
    (d / "empty.csv").write_bytes(b"")
    (d / "binary.csv").write_bytes(b"\x89PNG\r\n\x1a\n\x00\x00\x00\rIHDR")
    (d / "cut_utf16.csv").write_bytes(b"\xff\xfe!")
    write_trace_csv(TimeTrace(time_s=np.arange(5) * 1e-6, channels={"out": np.ones(5)}), d / "trace.csv")
    (d / "no_header.csv").write_text("10,1,2\n20,1,3\n30,1,4\n")
    (d / "one_point.csv").write_text(HEAD + "100,1,2\n")
    (d / "negative_freq.csv").write_text(HEAD + "100,1,2\n-200,1,2\n")
    (d / "nan.csv").write_text(HEAD + "100,1,2\n200,nan,2\n")
    (d / "far.csv").write_text(HEAD + "".join(f"{x:.6g},-20,-90\n" for x in np.geomspace(1e297, 1e300, 20)))
    (d / "four_points.csv").write_text(HEAD + "100,-1,-90\n200,-2,-91\n300,-3,-92\n400,-4,-93\n")
    (d / "lin_as_db.csv").write_text(HEAD + "".join(f"{x:.6g},{1e3 / x:.6g},-90\n" for x in f[::7]))
    # a loop gain below 0 dB everywhere in the band: |T| = 0.3 (f/10 Hz)^-0.25
    (d / "flat_loop.csv").write_text(HEAD + "".join(f"{x:.6g},{-10 - 5 * np.log10(x):.4f},-90\n"
                                                    for x in f[::4]))
    # reader rows (issue 21): rows that cannot be read, units not understood, one huge line
    (d / "marker.csv").write_text(HEAD + "100,1,2\n200,1,3\nMarker 1: 5 kHz\n300,1,4\n400,1,5\n")
    (d / "na.csv").write_text(HEAD + "100,1,2\n200,#N/A,#N/A\n300,1,4\n")
    (d / "scpi_nan.csv").write_text(HEAD + "100,1,2\n200,9.91E+37,2\n300,1,4\n")
    (d / "furlongs.csv").write_text(HEAD.replace("Hz", "furlongs") + "100,1,2\n200,1,3\n")
    (d / "grad.csv").write_text(HEAD.replace("deg", "grad") + "100,1,-2\n200,1,-30\n")
    (d / "disagree.csv").write_text(HEAD + "".join(f"{x:.6g},{-x / 1e3:.4f},{-x / 1e4:.3f}\n"
                                                   for x in f[::20]) + f"{f[100]:.6g},10,90\n")
    (d / "one_line.csv").write_bytes(b"1," * 100_000)
    (d / "twice.csv").write_text("Time (s),CH1 (V)\n" + "".join(
        f"{k * 1e-6:.6e},{np.tanh(k / 10):.5f}\n" * 2 for k in range(50)))
    (d / "bad_design.json").write_text('{"kind": "design"}')
    (d / "bad_model.json").write_text('{"kind": "plant_model", "zeros": true, "poles": [], "k": 1}')
    (d / "bad_design.toml").write_text('[plant]\nfiles = ["sweep.csv"]\ncolour = "red"\n')
    (d / "folder" / "escape.toml").write_text('[plant]\nfiles = ["../sweep.csv"]\n')
    generic = Path(__file__).resolve().parents[1] / "benchfit/bench/profiles/generic-analyzer.toml"
    (d / "format_spec.toml").write_text(generic.read_text(encoding="utf-8").replace(
        "{start_hz}", "{start_hz:>999999999}", 1), encoding="utf-8")
    (d / "bad_profile.toml").write_text('name = "mine"\nkind = "analyzer"\n')
    (d / "bad_limits.toml").write_text("phase_margin_deg = 45\n")
    design(LoopPlant(m, Sensing.divider(30e3, 10e3), name="buck", band_hz=(10, 1e6)), "type3",
           Targets(20e3, 55, 10), draws=0).to_json(d / "design.json")
    return d


@pytest.mark.parametrize("command,fragment,code", _rows())
def test_row(scratch, command, fragment, code):
    words = shlex.split(command)
    env = dict(os.environ)
    while "=" in words[0]:  # VAR=value prefixes
        k, v = words.pop(0).split("=", 1)
        env[k] = v
    assert words[0] == "benchfit"
    run = subprocess.run([sys.executable, "-m", "benchfit", *words[1:]], cwd=scratch, env=env,
                         capture_output=True, text=True, timeout=300)
    out = run.stdout + run.stderr
    assert "Traceback" not in out, out
    assert run.returncode == code, out
    # the table escapes '|' as '\|'
    assert fragment.replace("\\|", "|") in out, out
    if code == 2:  # one error line, in the project's form
        errors = [ln for ln in run.stderr.splitlines() if ln.startswith("benchfit: error: ")]
        assert len(errors) == 1, run.stderr


def test_the_table_covers_the_kinds_of_mistake():
    # the issue names these kinds; each must have at least one row
    text = DOC.read_text(encoding="utf-8")
    for kind in ("wrong file name", "wrong units", "a word where a number belongs",
                 "too few points for the order", "never crosses 0 dB", "does not answer",
                 "design file", "limits file", "profile", "crossover outside the plant's band"):
        assert kind in text, kind
    assert len(_rows()) >= 30
