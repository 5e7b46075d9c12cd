"""`benchfit design --stage`: the design file holds on the true plant (python-control as the
reference), and `margins` reads it."""

import json
import subprocess
import sys

import control
import numpy as np

from benchfit.data.canonical import write_sweep_csv
from benchfit.data.response import FrequencyResponse

sys.path.insert(0, __file__.rsplit("/", 1)[0])
from test_stage_design import comp_tf, true_plant  # noqa: E402


def run_cli(*args):
    return subprocess.run([sys.executable, "-m", "benchfit", *args], capture_output=True, text=True)


def test_design_stage_command_holds_on_the_true_plant(tmp_path):
    tf, model = true_plant(10e6, 20.0, 22e-6, 0.005)
    f = np.logspace(1, 8, 281)
    noise = 1 + 0.005 * np.random.default_rng(3).standard_normal(f.size)
    write_sweep_csv(FrequencyResponse(f, model.response(f) * noise, quantity="plant"),
                    tmp_path / "aol.csv")
    for net in ("lag-lead", "isolation"):
        out = tmp_path / f"{net}.json"
        r = run_cli("design", str(tmp_path / "aol.csv"), "--stage", "noninverting",
                    "--closed-loop-gain", "2", "--network", net, "--phase-margin", "60",
                    "--output-resistance", "20", "--load-cap", "22u", "--load-esr", "5m",
                    "--draws", "100", "--json", "-o", str(out))
        assert r.returncode == 0, r.stderr
        d = json.loads(r.stdout)
        assert d["kind"] == "stage_design" and d["network"] == net
        # python-control margins of the TRUE plant × the snapped compensator (fitted from noisy
        # data, so ±3° as the issue allows)
        gm, pm, _, _ = control.margin(tf * comp_tf(d))
        assert abs(pm - 60) <= 3.0, (net, pm)
        assert abs(d["closed_loop_gain"]["snapped"] / 2 - 1) <= 0.01
        r = run_cli("margins", str(out), "--json")
        assert r.returncode == 0, r.stderr
        assert json.loads(r.stdout)["min_phase_margin_deg"] == d["predicted"]["snapped"]["min_phase_margin_deg"]
    r = run_cli("design", str(tmp_path / "aol.csv"), "--stage", "inverting", "--closed-loop-gain",
                "-2.5", "--network", "auto", "--output-resistance", "20", "--load-cap", "22u",
                "--draws", "0", "--json")
    assert r.returncode == 0, r.stderr
    d = json.loads(r.stdout)
    assert d["closed_loop_gain"]["asked"] == -2.5 and d["choice"][-1].startswith("chosen:")


def test_stage_mistakes_are_one_line_errors(tmp_path):
    _, model = true_plant(1e6, 20.0, 1e-6, 0.005)
    f = np.logspace(1, 7, 61)
    write_sweep_csv(FrequencyResponse(f, model.response(f)), tmp_path / "aol.csv")
    r = run_cli("design", str(tmp_path / "aol.csv"), "--stage", "noninverting", "--draws", "0")
    assert r.returncode == 2 and "--closed-loop-gain" in r.stderr
    r = run_cli("design", str(tmp_path / "aol.csv"), "--closed-loop-gain", "2")
    assert r.returncode == 2 and "--stage" in r.stderr
    r = run_cli("design", str(tmp_path / "aol.csv"), "--stage", "noninverting", "--closed-loop-gain",
                "2", "--network", "isolation", "--draws", "0")
    assert r.returncode == 2 and "output resistance" in r.stderr and "Traceback" not in r.stderr
    r = run_cli("design", str(tmp_path / "aol.csv"), "--stage", "noninverting", "--closed-loop-gain",
                "2", "--network", "type3")
    assert r.returncode == 2 and "type3" in r.stderr


def test_inverting_lag_place_agrees_in_text_and_json(tmp_path):
    # In an inverting stage V+ is at ground, so the lag Rn–Cn is built from V- to ground (the
    # nodal reference in test_stage_networks.py puts it there); text and JSON must both say so.
    tf, model = true_plant(10e6, 20.0, 22e-6, 0.005)
    f = np.logspace(1, 8, 281)
    write_sweep_csv(FrequencyResponse(f, model.response(f), quantity="plant"), tmp_path / "aol.csv")
    args = ("design", str(tmp_path / "aol.csv"), "--stage", "inverting", "--closed-loop-gain", "-2",
            "--network", "lag-lead", "--phase-margin", "60", "--draws", "0")
    for extra in ((), ("--lag-at", "across"), ("--lag-at", "ground")):
        rj = run_cli(*args, *extra, "--json")
        rt = run_cli(*args, *extra)
        assert rj.returncode == 0 and rt.returncode == 0, rj.stderr + rt.stderr
        d = json.loads(rj.stdout)
        assert d["lag_at"] == "ground", extra
        assert "lag to ground" in rt.stdout and "lag across" not in rt.stdout, rt.stdout
