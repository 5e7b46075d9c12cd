"""`benchfit demo` runs the whole job end to end; its summary numbers are the design file's."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from benchfit.cli import main
from benchfit.fileio import as_float
from benchfit.output.curves import read_curve_csv
from benchfit.output.summary import summary_lines


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo") / "benchfit-out"
    capture = pytest.MonkeyPatch()
    import io
    import sys

    buf = io.StringIO()
    capture.setattr(sys, "stdout", buf)
    try:
        code = main(["demo", "--out", str(out), "--json"])
    finally:
        capture.undo()
    return {"code": code, "data": json.loads(buf.getvalue()), "out": out}


def test_demo_writes_every_file(demo):
    assert demo["code"] == 0
    job = demo["data"]["job"]
    for role in ("design", "fit", "zout_fit", "step", "spice", "report", "curve_step", "curve_zout_closed"):
        assert Path(job["files"][role]).is_file(), role
    assert Path(job["files"]["report"]).parent == demo["out"]
    assert demo["data"]["failed"] == 0


def test_summary_numbers_match_the_design_json(demo):
    s = demo["data"]["job"]["summary"]
    d = json.loads(Path(demo["data"]["job"]["files"]["design"]).read_text())
    pm = d["predicted"]["snapped"]
    assert s["phase_margin_deg"] == pytest.approx(as_float(pm["phase_margin_deg"]), abs=1e-9)
    assert s["crossover_hz"] == pytest.approx(as_float(pm["crossover_hz"]), rel=1e-12)
    assert s["gain_margin_db"] == pytest.approx(as_float(pm["gain_margin_db"]), abs=1e-9)
    assert s["modulus_margin"] == pytest.approx(as_float(pm["modulus_margin"]), abs=1e-12)
    assert s["yield"] == pytest.approx(d["spread"]["yield"], abs=1e-12)
    assert s["phase_margin_p1_deg"] == pytest.approx(d["spread"]["percentiles"]["pm_deg"]["p1"], abs=1e-9)
    assert s["parts"] == d["components"]["snapped"]
    assert s["network"] == d["network"] == "type3"
    assert s["target_crossover_hz"] == d["targets"]["crossover_hz"] == 20e3


def test_design_meets_what_the_demo_asks(demo):
    s = demo["data"]["job"]["summary"]
    # targets stated in the demo scenario: crossover 20 kHz, PM >= 55 deg, GM >= 10 dB
    assert s["closed_loop_stable"] and s["targets_met"]
    assert s["phase_margin_deg"] >= 55.0 - 0.1 and s["gain_margin_db"] >= 10.0
    assert 0.8 * 20e3 < s["crossover_hz"] < 1.25 * 20e3


def test_present_board_read_from_its_step(demo):
    # the sample step was generated with zeta 0.3 (sample_data/scenarios.json); a second-order
    # loop with zeta 0.3 has PM = atan(2 zeta / sqrt(sqrt(1 + 4 zeta^4) - 2 zeta^2)) = 33.3 deg
    # (standard second-order relation, e.g. Ogata, Modern Control Engineering, ch. 7)
    pb = demo["data"]["job"]["present_board"]
    assert pb["zeta"] == pytest.approx(0.30, abs=0.01)
    assert pb["phase_margin_deg"] == pytest.approx(33.3, abs=1.0)


def test_report_quotes_the_same_numbers(demo):
    job = demo["data"]["job"]
    text = Path(job["files"]["report"]).read_text(encoding="utf-8")
    for line in summary_lines(job["summary"]):
        assert line.replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;") in text
    step = read_curve_csv(job["files"]["curve_step"])
    assert step.unit == "V" and not step.is_frequency


def test_demo_prints_report_path_and_summary(tmp_path, capsys):
    assert main(["demo", "--out", str(tmp_path / "o")]) == 0
    out = capsys.readouterr().out
    assert "open the report: " + str((tmp_path / "o" / "report.html").resolve()) in out
    assert "phase margin" in out and "yield" in out and "fit of" in out


def test_demo_result_json_round_trip(demo):
    from benchfit.fileio import to_json_text
    from benchfit.output.demo import DemoResult

    job = demo["data"]["job"]
    back = DemoResult.from_dict(json.loads(to_json_text(job)))
    assert json.loads(to_json_text(back.to_dict())) == json.loads(to_json_text(job))
    assert back.provenance.settings["crossover_hz"] == 20e3
    assert any(s.endswith("buck_plant.csv") for s in back.provenance.sources)
