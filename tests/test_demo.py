"""`benchfit demo` runs the whole job end to end; its summary numbers are the design file's."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

from benchfit.cli import main
from benchfit.fileio import as_float
from benchfit.output.curves import read_curve_csv
from benchfit.output.summary import summary_lines

SAMPLES = Path(__file__).resolve().parents[1] / "sample_data"


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
    # The sample traces are the buck closed by an older Type III network (sample_data/generate.py);
    # scenarios.json records the zeta of the closed loop's dominant pole pair.  The load step rings
    # with it; a second-order loop with that zeta has
    # PM = atan(2 zeta / sqrt(sqrt(1 + 4 zeta^4) - 2 zeta^2))
    # (standard second-order relation, e.g. Ogata, Modern Control Engineering, ch. 7).
    # (The traces were a pure second-order response with zeta 0.3 before; issue 18 item 6.)
    import math

    truth = json.loads((SAMPLES / "scenarios.json").read_text())["scenarios"]["load_step_trace.csv"]["truth"]
    pb = demo["data"]["job"]["present_board"]
    z = truth["zeta"]
    assert pb["zeta"] == pytest.approx(z, abs=0.02)
    pm = math.degrees(math.atan(2 * pb["zeta"] / math.sqrt(math.sqrt(1 + 4 * pb["zeta"] ** 4) - 2 * pb["zeta"] ** 2)))
    assert pb["phase_margin_deg"] == pytest.approx(pm, abs=0.5)
    assert pb["load_step_a"] == pytest.approx(truth["delta_i_a"], rel=0.02)


def test_present_board_is_worse_than_the_new_design(demo):
    """The report's sentence: the present board rings more than the new design predicts."""
    job = demo["data"]["job"]
    scen = json.loads((SAMPLES / "scenarios.json").read_text())["scenarios"]
    present_peak = scen["load_step_trace.csv"]["truth"]["rp_ohm"]
    z = read_curve_csv(job["files"]["curve_zout_closed"])
    assert present_peak > 2 * float(np.max(np.abs(z.y)))
    # the load-step prediction is made for the measured current step, so the dips compare
    pred = read_curve_csv(job["files"]["curve_load_step"])
    assert abs(job["present_board"]["load_step_deviation_v"]) > 1.5 * float(np.max(np.abs(pred.y)))


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
