"""Stage predictions checked against benchfit's converter step code and scipy.signal.

References: scipy.signal.step on the closed loop written out by hand for a plain
non-inverting stage (G = A/(1 + Aβ), rational); benchfit.loop.timeresponse's
reference_step and load_step (exact discretisation of T's state space) for the
same loop; the stage's own block-diagram simulation is what is under test.
"""

import json
import subprocess
import sys

import numpy as np
import pytest
import scipy.signal as ss

from benchfit.loop.stage_load import StageLoad
from benchfit.loop.stage_networks import StageNetwork
from benchfit.loop.stage_predict import passive_model, predict_stage
from benchfit.loop.timeresponse import load_step, reference_step

sys.path.insert(0, __file__.rsplit("/", 1)[0])
from test_stage_design import true_plant  # noqa: E402


def test_plain_stage_step_matches_scipy_and_reference_step():
    _, aol = true_plant(1e6, 20.0, 1e-9, 0.01)
    net = StageNetwork("plain", {"Rf": 10e3, "Rg": 10e3})       # Ro unknown: β = 1/2
    p = predict_stage(net, aol, freq_hz=np.logspace(1, 8, 100), crossover_hz=4e5, step_v=0.01)
    t_model = aol.cascade(net.model())
    ref = reference_step(t_model, sensing_gain=0.5, step=0.01, t_end_s=float(p.step.time_s[-1]))
    np.testing.assert_allclose(p.step.value, np.interp(p.step.time_s, ref.time_s, ref.value),
                               atol=1e-4 * 0.02)
    num, den = ss.zpk2tf(aol.zeros, aol.poles, aol.k)          # G = A/(1 + A/2)
    g = ss.lti(num, np.polyadd(den, 0.5 * np.asarray(num)))
    _, y = ss.step(g, T=p.step.time_s)  # the record starts at t = 0, uniform
    np.testing.assert_allclose(p.step.value, 0.01 * y, atol=1e-6 * 0.02)
    assert p.step.overshoot_pct == pytest.approx(ref.overshoot_pct, abs=0.05)


def test_load_step_matches_the_converter_load_step():
    _, aol = true_plant(10e6, 20.0, 1e-6, 0.05)
    load = StageLoad(20.0, 1e-6, 0.05)
    net = StageNetwork("lead", {"Rf": 10e3, "Rg": 10e3, "Cf": 20e-12}, load=load)
    p = predict_stage(net, aol, freq_hz=np.logspace(1, 8, 100), crossover_hz=1e5, load_step_a=0.01)
    # the same loop for timeresponse.load_step: T and the open-loop impedance at the load node
    # Z_ol = Ro ‖ (ESR + 1/sC) ‖ (Rf + Rg‖...) written by hand (the feedback string loads it too)
    t_model = aol.cascade(net.model())
    ro, c, esr = 20.0, 1e-6, 0.05
    f = np.logspace(1, 8, 50)
    z_vals = net.at(f, "z_ol")
    s = 2j * np.pi * f
    z_hand = 1 / (1 / ro + 1 / (esr + 1 / (s * c)) + 1 / (10e3 / (1 + s * 10e3 * 20e-12) + 10e3))
    np.testing.assert_allclose(z_vals, z_hand, rtol=1e-9)
    zm = passive_model(net, "z_ol")
    np.testing.assert_allclose(zm.response(f), z_hand, rtol=1e-7)
    ref = load_step(zm, t_model, current_step_a=0.01, t_end_s=float(p.load.time_s[-1]))
    np.testing.assert_allclose(p.load.value, np.interp(p.load.time_s, ref.time_s, ref.value),
                               atol=1e-3 * abs(ref.peak_value))


def run_cli(*args):
    return subprocess.run([sys.executable, "-m", "benchfit", *args], capture_output=True, text=True)


def test_predict_and_report_read_a_stage_design(tmp_path):
    _, aol = true_plant(10e6, 20.0, 22e-6, 0.005)
    aol.to_json(tmp_path / "aol.json")
    out = tmp_path / "d.json"
    r = run_cli("design", str(tmp_path / "aol.json"), "--stage", "noninverting",
                "--closed-loop-gain", "2.5", "--network", "lag-lead", "--output-resistance", "20",
                "--load-cap", "22u", "--load-esr", "5m", "--draws", "50", "-o", str(out))
    assert r.returncode == 0, r.stderr
    for curve in ("loop", "closed", "zout", "step", "load_step"):
        r = run_cli("predict", str(out), "--curve", curve, "-o", str(tmp_path / f"{curve}.csv"),
                    "--step", "10m", "--load-step", "10m", "--json")
        assert r.returncode == 0, r.stderr
        assert json.loads(r.stdout)["points"] > 10
    step = np.loadtxt(tmp_path / "step.csv", delimiter=",", comments="#", skiprows=5)
    assert step[-1, 1] == pytest.approx(0.025, rel=0.01)       # 10 mV × 2.5
    r = run_cli("report", str(out), "-o", str(tmp_path / "r.html"))
    assert r.returncode == 0, r.stderr
    page = (tmp_path / "r.html").read_text()
    d = json.loads(out.read_text())
    assert f"rate of closure {d['crossing']['rate_of_closure_db_per_decade']:.0f} dB/decade" in page
    assert page.count("data:image/png;base64,") == 2
    # measured traces and a measured closed loop overlaid (the predicted curves themselves,
    # written as a scope record and a sweep: the report must draw them, not fail)
    from benchfit.data.canonical import write_sweep_csv, write_trace_csv
    from benchfit.data.response import FrequencyResponse
    from benchfit.data.trace import TimeTrace

    st = np.loadtxt(tmp_path / "step.csv", delimiter=",", comments="#", skiprows=5)
    ld = np.loadtxt(tmp_path / "load_step.csv", delimiter=",", comments="#", skiprows=5)
    write_trace_csv(TimeTrace(st[:, 0], {"out": st[:, 1]}), tmp_path / "st.csv")
    write_trace_csv(TimeTrace(ld[:, 0], {"dev": ld[:, 1]}), tmp_path / "ld.csv")
    cl = np.loadtxt(tmp_path / "closed.csv", delimiter=",", comments="#", skiprows=5)
    write_sweep_csv(FrequencyResponse(cl[:, 0], cl[:, 1] + 1j * cl[:, 2], quantity="closed"),
                    tmp_path / "cl.csv")
    r = run_cli("report", str(out), "-o", str(tmp_path / "r2.html"), "--trace", str(tmp_path / "st.csv"),
                "--load-trace", str(tmp_path / "ld.csv"), "--sweep", str(tmp_path / "cl.csv"))
    assert r.returncode == 0, r.stderr
    r = run_cli("report", str(out), "--pdf")
    assert r.returncode == 2 and "--pdf" in r.stderr


@pytest.mark.parametrize("kind", ["plain", "lead", "lag", "lag-lead", "isolation", "snubber"])
def test_time_domain_blocks_agree_with_the_checked_frequency_responses(kind):
    # the block diagram simulated in time must have the frequency response that
    # tests/test_stage_networks.py checked against an independent nodal analysis
    from benchfit.loop.stage_predict import closed_loop_blocks
    from benchfit.loop.stage_response import closed_loop_values

    _, aol = true_plant(5e6, 15.0, 2e-6, 0.02)
    parts = {"Rf": 15e3, "Rg": 10e3, "Cf": 300e-12, "Rn": 2e3, "Cn": 5e-9, "Riso": 4.7,
             "Rs": 1.0, "Cs": 10e-6}
    from benchfit.loop.stage_networks import PARTS

    net = StageNetwork(kind, {n: parts[n] for n in PARTS[kind]}, load=StageLoad(15.0, 2e-6, 0.02))
    g, z = closed_loop_blocks(net, aol)
    f = np.logspace(1, 7, 25)
    ref = closed_loop_values(net, aol.response(f), f)
    for sys_, want in ((g, ref["gain"]), (z, ref["z_closed"])):
        s = 2j * np.pi * f
        n = sys_.a.shape[0]
        h = np.array([(sys_.c @ np.linalg.solve(si * np.eye(n) - sys_.a, sys_.b))[0, 0] + sys_.d
                      for si in s])
        np.testing.assert_allclose(h, want, rtol=1e-6, atol=1e-12)
