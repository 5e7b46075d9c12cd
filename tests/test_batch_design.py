"""Plant sweeps closed with a design: batch margins against python-control on the true loop;
parameter windows; the CLI end to end with Parquet and a summary."""

import json
import subprocess
import sys

import numpy as np
import pytest

from benchfit.batch.limits import parse_limits
from benchfit.batch.runner import find_sweeps, run_lot
from benchfit.batch.synth_lot import lot_design, make_lot, unit_sweep
from benchfit.batch.table import read_table
from benchfit.batch.task import TaskSettings, design_loop_from_dict
from benchfit.fileio import write_json_atomic

N = 6
SEED = 4


@pytest.fixture(scope="module")
def plant_lot(tmp_path_factory):
    d = tmp_path_factory.mktemp("plants")
    make_lot(d / "lot", N, quantity="plant", seed=SEED)
    write_json_atomic(d / "design.json", lot_design())
    return d


@pytest.fixture(scope="module")
def rows(plant_lot, tmp_path_factory):
    # max_rms_db: a good fit of 0.4 % noise sits near 0.035 dB rms (the noise floor);
    # 0.2 dB is a bound a production user would set to reject fits that missed a part.
    lim = parse_limits("[margins]\nmin_phase_margin_deg = 45\n[fit]\nmax_rms_db = 0.2\n"
                       "[parameters]\npair1_f0_hz = [6.5e3, 7.6e3]\n")
    settings = TaskSettings(design=design_loop_from_dict(lot_design()), limits=lim, params=("gain",))
    out = tmp_path_factory.mktemp("out") / "r.csv"
    run_lot(find_sweeps(plant_lot / "lot"), settings, out, workers=1, progress=None)
    return sorted(read_table(out)[1], key=lambda r: r["file"])


def test_margins_of_fitted_units_match_python_control_on_the_true_loop(rows):
    control = pytest.importorskip("control")
    assert len(rows) == N
    good = 0
    for i, r in enumerate(rows):
        assert r["margins_from"] == "model" and r["status"] in ("pass", "fail"), r
        if r["fit_rms_db"] > 0.2:
            # a fit that missed part of the response is flagged, never passed silently
            assert r["status"] == "fail" and "fit residual" in r["reason"], r
            continue
        good += 1
        # Reference: python-control's stability_margins on the noiseless loop of the same
        # unit (generating model x design compensator x divider), densely sampled.
        true = unit_sweep(SEED, i, quantity="loop", noise=0.0, points=4001, f_min_hz=10, f_max_hz=1e6)
        gm, pm, _sm, _wpc, wgc, _wms = control.stability_margins(
            control.frd(true.response, 2 * np.pi * true.freq_hz))
        # The fit sees 0.4 % noise; a fit at the noise floor moves the margins by far less
        # than these bounds (engineering resolution).
        assert r["phase_margin_deg"] == pytest.approx(pm, abs=1.0), i
        assert r["crossover_hz"] == pytest.approx(wgc / (2 * np.pi), rel=0.02), i
        assert r["gain_margin_db"] == pytest.approx(20 * np.log10(gm), abs=0.5), i
        assert r["closed_loop_stable"] is True
        assert r["gain_crossings"] == 1
    assert good >= N // 2, "most units of a clean generated lot should fit at the noise floor"


def test_parameter_columns_and_windows(rows):
    for r in rows:
        params = json.loads(r["parameters"])
        assert r["param:gain"] == params["gain"][0]
        f0 = r["param:pair1_f0_hz"]
        assert f0 == params["pair1_f0_hz"][0]
        inside = 6.5e3 <= f0 <= 7.6e3
        assert ("pair1_f0_hz " in (r["reason"] or "")) == (not inside), r
        if r["status"] == "pass":
            assert inside
    # the lot's spread puts units on both sides of this window
    assert {6.5e3 <= r["param:pair1_f0_hz"] <= 7.6e3 for r in rows} == {True, False}


def test_cli_design_parquet_summary(plant_lot, tmp_path):
    pd = pytest.importorskip("pandas")
    pytest.importorskip("pyarrow")
    (tmp_path / "lim.toml").write_text("[margins]\nmin_phase_margin_deg = 45\nmin_gain_margin_db = 6\n")
    out = tmp_path / "res.parquet"
    res = subprocess.run(
        [sys.executable, "-m", "benchfit", "batch", str(plant_lot / "lot"), "--design",
         str(plant_lot / "design.json"), "--limits", str(tmp_path / "lim.toml"), "-o", str(out),
         "--summary", str(tmp_path / "s.json"), "--workers", "2", "--quiet", "--json"],
        capture_output=True, text=True, timeout=300)
    assert res.returncode == 0, res.stderr
    df = pd.read_parquet(out)
    assert len(df) == N and list(df["file"]) == sorted(df["file"])
    assert (df["status"] == "pass").all()
    s = json.loads((tmp_path / "s.json").read_text())
    assert s["counts"] == {"pass": N} and s["yield_fraction"] == 1.0
    assert json.loads(res.stdout)["summary"] == s


def test_cli_errors_are_one_line(plant_lot, tmp_path):
    (tmp_path / "lim.toml").write_text("[margins]\nmin_phase_margin = 45\n")
    res = subprocess.run([sys.executable, "-m", "benchfit", "batch", str(plant_lot / "lot"),
                          "--limits", str(tmp_path / "lim.toml"), "-o", str(tmp_path / "r.csv")],
                         capture_output=True, text=True, timeout=120)
    assert res.returncode == 2
    assert res.stderr.strip().splitlines() == [
        f"benchfit: error: {tmp_path / 'lim.toml'}, line 2: unknown key margins.min_phase_margin; "
        "expected one of min_phase_margin_deg, min_gain_margin_db, min_modulus_margin, "
        "min_delay_margin_s, crossover_hz, require_stable"]
    res = subprocess.run([sys.executable, "-m", "benchfit", "batch", str(plant_lot / "lot"),
                          "--dask", "tcp://127.0.0.1:9", "-o", str(tmp_path / "r2.csv")],
                         capture_output=True, text=True, timeout=120)
    assert res.returncode == 2 and res.stderr.startswith("benchfit: error: --dask: cannot reach")


def test_real_design_file_gives_the_designs_own_prediction_for_the_nominal_unit(tmp_path):
    # A design written by `benchfit design` (not hand-made data): batch reads its snapped
    # compensator and divider, fits the same nominal sweep the design fitted (the fit is
    # deterministic), and so must land on the design's own predicted margins.
    from benchfit.data import write_sweep_csv

    write_sweep_csv(unit_sweep(9, 0), tmp_path / "nominal.csv")
    res = subprocess.run([sys.executable, "-m", "benchfit", "design", str(tmp_path / "nominal.csv"),
                          "--network", "type3", "--crossover", "25k", "--divider", "27k:6k",
                          "--draws", "0", "-o", str(tmp_path / "d.json")],
                         capture_output=True, text=True, timeout=300)
    assert res.returncode == 0, res.stderr
    design = json.loads((tmp_path / "d.json").read_text())
    settings = TaskSettings(design=design_loop_from_dict(design, "d.json"))
    assert settings.design.sensing_gain == pytest.approx(6 / 33)
    out = tmp_path / "r.csv"
    run_lot([str(tmp_path / "nominal.csv")], settings, out, workers=1, progress=None)
    (row,) = read_table(out)[1]
    pred = design["predicted"]["snapped"]
    assert row["phase_margin_deg"] == pytest.approx(pred["phase_margin_deg"], abs=1e-6)
    assert row["crossover_hz"] == pytest.approx(pred["crossover_hz"], rel=1e-6)
    assert row["gain_margin_db"] == pytest.approx(pred["gain_margin_db"], abs=1e-6)
