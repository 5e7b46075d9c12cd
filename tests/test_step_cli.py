"""`benchfit step`: output keys, files written, one-line errors with exit status 2."""

import json

import control
import numpy as np
import pytest

from benchfit.cli import main
from benchfit.data import FrequencyResponse, TimeTrace, write_trace_csv
from benchfit.fileio import write_json_atomic
from benchfit.fitting.model import PlantModel
from benchfit.steps.loadstep import predict_load_step
from benchfit.steps.models import closed_loop_unit_step, second_order_step
from benchfit.steps.result import StepResult

KEYS = ("zeta", "zeta_stderr", "natural_freq_hz", "overshoot_pct", "rise_time_s", "settling_time_s",
        "initial_v", "final_v", "step_v", "phase_margin_estimate_deg")


@pytest.fixture
def step_file(tmp_path):
    rng = np.random.default_rng(1)
    t = np.linspace(-2e-4, 2e-3, 4000)
    out = second_order_step(t, 0.3, 5e3, 3.3, 0.2, 0.0) + 2e-3 * rng.standard_normal(t.size)
    ref = np.where(t >= 0, 0.85, 0.8)
    path = tmp_path / "step.csv"
    write_trace_csv(TimeTrace(t, {"ref": ref, "out": out}), path)
    return path


def _run(capsys, *argv):
    code = main([str(a) for a in argv])
    cap = capsys.readouterr()
    return code, cap.out, cap.err


def test_json_keys_and_values(step_file, capsys):
    code, out, err = _run(capsys, "step", step_file, "--channel", "out", "--json")
    assert code == 0, err
    d = json.loads(out)
    for k in KEYS:
        assert k in d, k
    assert d["zeta"] == pytest.approx(0.3, rel=0.03)
    assert d["natural_freq_hz"] == pytest.approx(5e3, rel=0.01)
    assert d["step_v"] == pytest.approx(0.2, rel=0.01)
    # PM from ζ with the exact second-order relation (see tests/test_step_pm.py for the reference)
    assert d["phase_margin_estimate_deg"] == pytest.approx(33.27, abs=1.5)
    assert "curve" not in d["fits"][0]


def test_text_report_and_output_file(step_file, tmp_path, capsys):
    res = tmp_path / "r.json"
    code, out, _ = _run(capsys, "step", step_file, "--channel", "1", "--model", "third-order",
                        "--band", "5mV", "-o", res)
    assert code == 0
    assert "Fit: second-order" in out and "Fit: third-order" in out
    assert "common practice, no source" in out
    r = StepResult.from_json(res)
    assert [f.model for f in r.fits] == ["second-order", "third-order"]
    assert r.fits[0].fitted_v.size == 4000
    assert r.measurement.band == pytest.approx(0.005 / 0.2, rel=0.02)


def test_loop_design_comparison(tmp_path, capsys):
    zeta, wn = 0.4, 2 * np.pi * 3e3
    loop = PlantModel(zeros=[], poles=[0.0, -2 * zeta * wn], k=wn**2)
    _, pm, _, _, wc, _ = control.stability_margins(control.tf([wn**2], [1, 2 * zeta * wn, 0]))
    design = {"kind": "design", "loop_model": {"ideal": loop.to_dict(), "snapped": loop.to_dict()},
              "predicted": {"snapped": {"phase_margin_deg": pm, "crossover_hz": wc / (2 * np.pi)}}}
    dpath = tmp_path / "design.json"
    write_json_atomic(dpath, design)
    t = np.linspace(-2e-4, 3e-3, 5000)
    u, _ = closed_loop_unit_step(t, loop)
    y = 1.0 + 0.1 * u + 5e-4 * np.random.default_rng(2).standard_normal(t.size)
    tpath = tmp_path / "t.csv"
    write_trace_csv(TimeTrace(t, {"v": y}), tpath)
    code, out, err = _run(capsys, "step", tpath, "--model", f"loop:{dpath}", "--json")
    assert code == 0, err
    d = json.loads(out)
    rows = {r["quantity"]: r for r in d["comparison"]["rows"]}
    assert rows["overshoot_pct"]["predicted"] == pytest.approx(rows["overshoot_pct"]["measured"], abs=1.0)
    assert rows["phase_margin_deg"]["predicted"] == pytest.approx(pm)
    assert rows["phase_margin_deg"]["measured"] == pytest.approx(pm, abs=1.5)
    loop_fit = next(f for f in d["fits"] if f["model"] == "loop")
    gain = next(p for p in loop_fit["parameters"] if p["name"] == "loop_gain")
    assert gain["value"] == pytest.approx(1.0, rel=0.02)


def test_load_step_with_zout(tmp_path, capsys):
    w = 2 * np.pi * 8e3
    zcl = PlantModel(zeros=[0.0], poles=np.roots([1, 2 * 0.3 * w, w * w]), k=0.04 * 2 * 0.3 * w)
    f = np.logspace(1, 7, 400)
    zpath = tmp_path / "zcl.json"
    FrequencyResponse(f, zcl.response(f), quantity="impedance").to_json(zpath)
    t = np.linspace(-1e-4, 1e-3, 3000)
    v = predict_load_step(t, zcl, 1.0, 5.0, 0.0) + 2e-4 * np.random.default_rng(5).standard_normal(t.size)
    tpath = tmp_path / "ls.csv"
    write_trace_csv(TimeTrace(t, {"vout": v}), tpath)
    code, out, err = _run(capsys, "step", tpath, "--load-step", "--current-step", "1", "--zout", zpath,
                          "--json")
    assert code == 0, err
    d = json.loads(out)
    assert d["mode"] == "load_step"
    rows = {r["quantity"]: r for r in d["comparison"]["rows"]}
    assert rows["deviation_v"]["predicted"] == pytest.approx(rows["deviation_v"]["measured"], rel=0.05)
    assert d["peak_impedance_ohm"] == pytest.approx(abs(d["deviation_v"]))


@pytest.mark.parametrize("args,needle", [
    (["--band", "abc"], "--band"),
    (["--channel", "nope"], "no channel"),
    (["--model", "fifth-order"], "--model"),
    (["--model", "loop:/nonexistent/design.json"], "file not found"),
    (["--zout", "z.json"], "--load-step"),
])
def test_bad_options_one_line_exit_2(step_file, capsys, args, needle):
    code, out, err = _run(capsys, "step", step_file, *args)
    assert code == 2
    assert out == ""
    assert err.startswith("benchfit: error:") and err.count("\n") == 1
    assert needle in err


def test_bad_traces_one_line_exit_2(tmp_path, capsys):
    t = np.linspace(0, 1e-3, 500)
    flat = tmp_path / "flat.csv"
    write_trace_csv(TimeTrace(t, {"v": 1.0 + 1e-3 * np.random.default_rng(0).standard_normal(500)}), flat)
    nan = tmp_path / "nan.csv"
    y = second_order_step(t, 0.5, 1e4, 0, 1, 1e-4)
    y[300] = np.nan
    write_trace_csv(TimeTrace(t, {"v": y}), nan)
    for path, needle in ((flat, "no step found"), (nan, "NaN"), (tmp_path / "missing.csv", "")):
        code, out, err = _run(capsys, "step", path)
        assert code == 2
        assert err.startswith("benchfit: error:") and err.count("\n") == 1
        assert needle in err


SAMPLE_LOAD = __import__("pathlib").Path(__file__).resolve().parents[1] / "sample_data" / "load_step_trace.csv"


def test_undetermined_zeta_gives_no_phase_margin_and_the_channel_is_named(capsys):
    # The sample load-step file holds Iout (A) and Vout AC (V); without --channel the reference
    # step mode measures the first column, a square current step sampled too coarsely to show
    # its shape (rise within one sample): ζ is not determined, so neither is the margin.
    code, out, err = _run(capsys, "step", SAMPLE_LOAD)
    assert code == 0, err
    sec = out.split("Phase margin estimated")[1].split("\n\n")[0]
    assert "not determined" in sec and "±" not in sec and "100·ζ" not in sec, sec
    assert "step instant             0 s" in out, out
    assert "measured 'Iout', the first column" in out and "--load-step" in out
    code, out, err = _run(capsys, "step", SAMPLE_LOAD, "--json")
    d = json.loads(out)
    assert d["phase_margin_estimate_deg"] is None and d["phase_margin_rule_of_thumb_deg"] is None
    assert d["phase_margin"]["not_determined"].startswith("the step rises within")
    # A load step takes the voltage channel and says why.
    code, out, err = _run(capsys, "step", SAMPLE_LOAD, "--load-step", "--json")
    d = json.loads(out)
    assert d["measurement"]["channel"] == "Vout AC"
    assert any("measured 'Vout AC', the first channel in volts" in w for w in d["warnings"])


def test_a_given_step_time_on_an_unresolved_edge_is_no_traceback(capsys):
    # --step-time just after the edge of a current step that rises within one sample: the
    # measured rise is 0; the fit starts from one sample instead of dividing by it.
    code, out, err = _run(capsys, "step", SAMPLE_LOAD, "--step-time", "100n")
    assert code == 0, err
    assert "step instant             100 ns" in out  # given, so printed as given
    assert "not determined" in out.split("Phase margin estimated")[1]
