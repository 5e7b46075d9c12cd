"""TOML design file and the `benchfit design` / `benchfit check` commands."""

import json

import numpy as np
import pytest

from benchfit.cli import main
from benchfit.errors import InputError
from benchfit.fitting.model import PlantModel
from benchfit.loop.designfile import read_design_file


def buck_model():
    # our own scenario: 12 V buck, L 10 uH, C 100 uF, ESR 20 mohm, 1 ohm load
    L, C, esr, r = 10e-6, 100e-6, 0.02, 1.0
    w0 = 1 / np.sqrt(L * C)
    wz = 1 / (esr * C)
    return PlantModel(zeros=np.array([-wz]), poles=np.roots([1, w0 / (r * np.sqrt(C / L)), w0 ** 2]),
                      k=12 * w0 ** 2 / wz)


FULL = """
[plant]
files = ["plants/buck.json"]

[sensing]
divider = [30e3, 10e3]

[opamp]
gbw_hz = 20e6
dc_gain_db = 90

[network]
type = "type3"
method = "k-factor"
r_in_ohm = 10e3

[targets]
crossover_hz = 20e3
phase_margin_deg = 55
gain_margin_db = 10

[parts]
resistor_series = "E96"
capacitor_series = "E12"
resistor_tolerance = 0.01
capacitor_tolerance = 0.05

[spread]
draws = 300
seed = 5
"""


@pytest.fixture()
def setup(tmp_path):
    (tmp_path / "plants").mkdir()
    buck_model().to_json(tmp_path / "plants" / "buck.json")
    toml = tmp_path / "design.toml"
    toml.write_text(FULL)
    return tmp_path, toml


def test_file_parsed_and_paths_relative_to_it(setup, monkeypatch, tmp_path_factory):
    folder, toml = setup
    monkeypatch.chdir(tmp_path_factory.mktemp("elsewhere"))
    spec = read_design_file(toml)
    assert spec.plant_files == (str((folder / "plants" / "buck.json").resolve()),)
    assert spec.sensing.gain == pytest.approx(0.25)
    assert spec.opamp.gbw_hz == 20e6 and spec.opamp.dc_gain_db == 90
    assert spec.kind == "type3" and spec.targets.crossover_hz == 20e3
    assert spec.series == ("E96", "E12") and spec.tolerances == (0.01, 0.05)
    d = spec.run()
    assert d.targets_met
    assert d.spread.draws == 300 and d.spread.r_tol == 0.01


@pytest.mark.parametrize("bad,needle", [
    ("[network]\ntyp = 'type2'\n", "network.typ"),
    ("[targets]\nphase_margin = 60\n", "targets.phase_margin"),
    ("[colours]\nx = 1\n", "colours"),
    ("[targets]\ncrossover_hz = 'fast'\n", "targets.crossover_hz"),
    ("[spread]\ndraws = -3\n", "spread.draws"),
    ("[spread]\nmin_yield_percent = 100\n", "spread.min_yield_percent"),
    ("[spread]\nmin_yield = 95\n", "spread.min_yield"),
    ("[sensing]\ndivider = [1e3]\n", "sensing.divider"),
    ("[network]\ntype = 'type7'\n", "network.type"),
    ("[plant\n", "not valid TOML"),
])
def test_design_file_errors_name_the_key(tmp_path, bad, needle):
    p = tmp_path / "bad.toml"
    p.write_text(bad)
    with pytest.raises(InputError) as e:
        read_design_file(p)
    assert needle in str(e.value) and "bad.toml" in str(e.value)


def test_cli_design_json_and_check(setup, capsys):
    folder, toml = setup
    out = folder / "d.json"
    assert main(["design", "--file", str(toml), "--phase-margin", "50", "-o", str(out), "--json"]) == 0
    d = json.loads(capsys.readouterr().out)
    assert d["kind"] == "design" and d["targets"]["phase_margin_deg"] == 50
    assert d["targets"]["crossover_hz"] == 20e3  # from the file, not overridden
    assert d["predicted"]["snapped"]["phase_margin_deg"] >= 50 - 0.1
    assert json.loads(out.read_text())["components"] == d["components"]
    # check: the design's own parts reproduce its prediction; a changed part changes it
    assert main(["check", "--design", str(out), "--json"]) == 0
    c = json.loads(capsys.readouterr().out)
    assert c["predicted"]["snapped"]["phase_margin_deg"] == pytest.approx(
        d["predicted"]["snapped"]["phase_margin_deg"], abs=1e-6)
    r2 = d["components"]["snapped"]["R2"]
    assert main(["check", str(folder / "plants" / "buck.json"), "--design", str(out),
                 "--parts", f"R2={r2 * 3}", "--json"]) == 0
    c3 = json.loads(capsys.readouterr().out)
    assert c3["components"]["snapped"]["R2"] == pytest.approx(r2 * 3)
    assert c3["predicted"]["snapped"]["crossover_hz"] > d["predicted"]["snapped"]["crossover_hz"]


def test_cli_flags_only(setup, capsys):
    folder, _ = setup
    rc = main(["design", str(folder / "plants" / "buck.json"), "--network", "type3",
               "--crossover", "15k", "--phase-margin", "50", "--divider", "30k:10k",
               "--opamp-gbw", "10M", "--series", "E24:E12", "--tolerance", "1:5", "--draws", "200",
               "--seed", "1"])
    assert rc == 0
    text = capsys.readouterr().out
    assert "snapped" in text and "Monte Carlo: 200 draws, R ±1 %, C ±5 %" in text


@pytest.mark.parametrize("argv,needle", [
    (["--network", "type9"], "type9"),
    (["--divider", "30k"], "--divider"),
    (["--tolerance", "a:b"], "--tolerance"),
    (["--series", "E7:E12"], "E7"),
    (["--crossover", "fast"], "--crossover"),
    (["--min-yield", "150"], "--min-yield"),
    (["--min-yield", "many"], "--min-yield"),
    (["--min-yield", "95"], "needs Monte Carlo draws"),
])
def test_cli_user_errors_are_one_line_exit_2(setup, capsys, argv, needle):
    folder, _ = setup
    rc = main(["design", str(folder / "plants" / "buck.json"), "--draws", "0", *argv])
    err = capsys.readouterr().err
    assert rc == 2
    assert err.startswith("benchfit: error:") and needle in err and err.count("\n") == 1


def test_check_unknown_part_is_an_error(setup, capsys):
    folder, _ = setup
    out = folder / "d.json"
    assert main(["design", "--file", str(folder / "design.toml"), "--draws", "0", "-o", str(out),
                 "--json"]) == 0
    capsys.readouterr()
    assert main(["check", "--design", str(out), "--parts", "R7=1k"]) == 2
    assert "R7" in capsys.readouterr().err


def test_fit_result_json_keeps_band_and_uncertainty(tmp_path):
    from benchfit.data.response import FrequencyResponse
    from benchfit.fitting import fit
    from benchfit.loop.designfile import load_plant

    f = np.logspace(1, 6, 201)
    rng = np.random.default_rng(3)
    h = buck_model().response(f) * (1 + 0.003 * (rng.standard_normal(201) + 1j * rng.standard_normal(201)))
    fr = fit(FrequencyResponse(f, h, quantity="plant"), delay="none")
    fr.to_json(tmp_path / "fit.json")
    lp = load_plant(tmp_path / "fit.json")
    assert lp.band_hz == pytest.approx((10.0, 1e6))
    assert lp.draws is not None
    draws = lp.draws(np.array([1e3, 1e4]), 5, np.random.default_rng(0))
    assert draws.shape == (5, 2)
    # sweeps load through read_sweep + fit: same thing from a canonical CSV
    from benchfit.data import write_sweep_csv

    write_sweep_csv(FrequencyResponse(f, h, quantity="plant"), tmp_path / "sweep.csv")
    lp2 = load_plant(tmp_path / "sweep.csv", fit_options={"delay": "none"})
    np.testing.assert_allclose(lp2.response(np.array([2e3])), lp.response(np.array([2e3])), rtol=1e-3)


def test_min_yield_from_the_file_and_the_command_line(setup, capsys):
    folder, toml = setup
    spec = read_design_file(toml)
    p = folder / "y.toml"
    p.write_text("[plant]\nfiles = ['plants/buck.json']\n"
                 "[spread]\ndraws = 300\nseed = 2\nmin_yield_percent = 99\n")
    assert read_design_file(p).min_yield == pytest.approx(0.99)
    assert spec.min_yield is None
    assert main(["design", "--file", str(toml), "--min-yield", "99", "--json"]) == 0
    d = json.loads(capsys.readouterr().out)
    assert d["spread"]["yield"] >= 0.99
    assert d["provenance"]["settings"]["min_yield"] == pytest.approx(0.99)
    assert d["targets"]["phase_margin_deg"] == spec.targets.phase_margin_deg
