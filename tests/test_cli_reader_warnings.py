"""Commands that read a sweep or trace and go on to fit or judge it repeat the reader's
warnings on stderr (inspect shows them; fit, margins, step and loopgain must not hide them)."""

import json
from pathlib import Path

from benchfit.cli import main

SAMPLES = Path(__file__).resolve().parents[1] / "sample_data"


def _with_bad_row(tmp_path):
    lines = (SAMPLES / "ldo_loop.csv").read_text().splitlines()
    head = next(i for i, ln in enumerate(lines) if ln[:1].isdigit())
    lines.insert(head + 30, "Marker 1: 5 kHz")
    p = tmp_path / "marked.csv"
    p.write_text("\n".join(lines) + "\n")
    return p, head + 31


def test_fit_and_margins_say_which_rows_were_skipped(tmp_path, capsys):
    p, line = _with_bad_row(tmp_path)
    assert main(["margins", str(p), "--quantity", "loop", "--skip-bad-rows", "--json"]) == 0
    err = capsys.readouterr().err
    assert f"benchfit: warning: {p}:" in err and str(line) in err, err
    assert main(["fit", str(p), "--skip-bad-rows", "--order", "2", "--json"]) == 0
    err = capsys.readouterr().err
    assert f"benchfit: warning: {p}:" in err and str(line) in err, err


def test_without_the_option_the_row_is_an_error_naming_its_line(tmp_path, capsys):
    p, line = _with_bad_row(tmp_path)
    assert main(["fit", str(p)]) == 2
    err = capsys.readouterr().err
    assert str(p) in err and f"line {line}" in err and "Traceback" not in err, err


def test_design_from_a_sweep_repeats_what_reading_and_fitting_said(tmp_path, capsys):
    """A design made straight from a sweep file says what the reader warned of (here: the
    file holds two traces and only the first, 99 of 401 points, was taken)."""
    lines = (SAMPLES / "buck_plant.csv").read_text(encoding="utf-8").splitlines()
    first = next(i for i, ln in enumerate(lines) if ln[:1].isdigit())
    lines.insert(first + 99, lines[first - 1])   # the header again, inside the data
    p = tmp_path / "dup_header.csv"
    p.write_text("\n".join(lines) + "\n", encoding="utf-8")
    assert main(["design", str(p), "--network", "type2", "--crossover", "30", "--phase-margin", "45",
                 "--divider", "10k:3.24k", "--draws", "0", "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert any("dup_header.csv: file holds 2 traces" in w for w in out["warnings"]), out["warnings"]
    assert main(["design", str(p), "--network", "type2", "--crossover", "30", "--phase-margin", "45",
                 "--divider", "10k:3.24k", "--draws", "0"]) == 0
    assert "benchfit: warning: dup_header.csv: file holds 2 traces" in capsys.readouterr().err
