"""The capture, scope, instruments and profiles commands (in-process, no hardware)."""

import json

import numpy as np
import pytest

from benchfit.bench.profile import SHIPPED_DIR
from benchfit.cli import build_parser, main
from benchfit.data import FrequencyResponse, TimeTrace, write_sweep_csv, write_trace_csv
from benchfit.data.canonical import read_canonical_sweep, read_canonical_trace


@pytest.fixture
def sweep_file(tmp_path):
    # a second-order low-pass, fn = 2 kHz, zeta = 0.3 (textbook H = wn^2 / (s^2 + 2 zeta wn s + wn^2))
    f = np.geomspace(10, 1e5, 300)
    s = 2j * np.pi * f
    wn = 2 * np.pi * 2e3
    h = wn ** 2 / (s ** 2 + 2 * 0.3 * wn * s + wn ** 2)
    path = tmp_path / "plant.csv"
    write_sweep_csv(FrequencyResponse(f, h, quantity="plant"), path)
    return path, f, h


def run(argv, capsys):
    code = main(argv)
    out, err = capsys.readouterr()
    return code, out, err


@pytest.mark.parametrize("transport", ["sim", "tcp"])
def test_capture_simulate_sweep_file(tmp_path, sweep_file, capsys, transport):
    path, f, h = sweep_file
    out = tmp_path / "cap.csv"
    code, stdout, err = run(["capture", "--simulate", str(path), "--points", "50", "-o", str(out),
                             "--transport", transport, "--json", "--no-progress"], capsys)
    assert code == 0, err
    doc = json.loads(stdout)
    assert doc["kind"] == "capture_result" and doc["points_saved"] == 50 and doc["status"] == "complete"
    resp = read_canonical_sweep(out)
    assert resp.quantity == "plant"                     # taken from the simulated sweep
    assert resp.f_min_hz == pytest.approx(10) and resp.f_max_hz == pytest.approx(1e5)
    ref = np.interp(np.log(resp.freq_hz), np.log(f), np.abs(h))
    # interpolation between 300 log points plus 0.1 % noise: well inside 1 %
    np.testing.assert_allclose(np.abs(resp.response), ref, rtol=1e-2)


def test_captured_file_goes_straight_into_fit(tmp_path, sweep_file, capsys):
    parser = build_parser()
    subcommands = parser._subparsers._group_actions[0].choices
    if "fit" not in subcommands:
        pytest.skip("the fit command is not in this tree yet")
    path, _, _ = sweep_file
    out = tmp_path / "cap.csv"
    assert run(["capture", "--simulate", str(path), "--points", "80", "-o", str(out),
                "--no-progress"], capsys)[0] == 0
    code, _, err = run(["fit", str(out), "--json"], capsys)
    assert code == 0, err


def test_capture_text_output_and_step_mode(tmp_path, sweep_file, capsys):
    path, _, _ = sweep_file
    out = tmp_path / "s.csv"
    code, stdout, _ = run(["capture", "--simulate", str(path), "--start", "100", "--stop", "10k",
                           "--points", "7", "--mode", "step", "--level", "20m", "-o", str(out),
                           "--no-progress"], capsys)
    assert code == 0 and stdout.strip() == f"captured 7 points into {out}"
    assert read_canonical_sweep(out).meta["settings"]["level_v"] == pytest.approx(0.02)


@pytest.mark.parametrize("argv,fragment", [
    (["capture"], "RESOURCE: missing"),
    (["capture", "TCPIP::x::INSTR", "--simulate", "y.csv"], "not both"),
    (["capture", "TCPIP::x::INSTR"], "--profile: required"),
    (["capture", "--simulate", "{sweep}", "--start", "abc"], "--start: 'abc' is not a number"),
    (["capture", "--simulate", "{sweep}", "--start", "1e6", "--stop", "10"], "--stop"),
    (["capture", "--simulate", "{sweep}", "--resume"], "--resume needs -o"),
    (["capture", "--simulate", "{sweep}", "--profile", "generic-scope"], "expected an analyzer profile"),
    (["capture", "--simulate", "{sweep}", "--start", "1", "--stop", "100", "--points", "5",
      "-o", "{tmp}/out.csv", "--no-progress"], "-222 Data out of range"),
])
def test_capture_errors_are_one_line_exit_2(tmp_path, sweep_file, capsys, argv, fragment):
    argv = [a.replace("{sweep}", str(sweep_file[0])).replace("{tmp}", str(tmp_path)) for a in argv]
    code, _, err = run(argv, capsys)
    assert code == 2
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("benchfit: error: ") and fragment in lines[0]


def test_scope_simulate_round_trip(tmp_path, capsys):
    # underdamped second-order step (textbook): 1 - e^(-zeta wn t)(cos wd t + zeta/sqrt(1-zeta^2) sin wd t)
    t = np.arange(-100, 900) * 1e-6
    zeta, wn = 0.3, 2 * np.pi * 5e3
    wd = wn * np.sqrt(1 - zeta ** 2)
    tp = np.clip(t, 0, None)
    v = np.where(t < 0, 0.0, 1 - np.exp(-zeta * wn * tp) * (np.cos(wd * tp)
                                                           + zeta / np.sqrt(1 - zeta ** 2) * np.sin(wd * tp)))
    src = tmp_path / "step.csv"
    write_trace_csv(TimeTrace(t, {"out": v}), src)
    out = tmp_path / "got.csv"
    code, stdout, err = run(["scope", "--simulate", str(src), "-o", str(out), "--json"], capsys)
    assert code == 0, err
    assert json.loads(stdout)["samples"] == 1000
    got = read_canonical_trace(out)
    np.testing.assert_allclose(got.time_s, t, atol=1e-15)
    assert got.meta["scaling"]["sample_interval_s"] > 0
    # the simulated scope's 16-bit ADC spans 1.1x the signal; real32 adds ~6e-8 relative
    lsb = (v.max() - v.min()) * 1.1 / (2 ** 16 - 2)
    assert np.max(np.abs(got.channel() - v)) <= 0.5 * lsb * 1.0001 + 1e-6


def test_scope_needs_resource_or_simulate(capsys):
    code, _, err = run(["scope", "-o", "x.csv"], capsys)
    assert code == 2 and "exactly one of RESOURCE or --simulate" in err


def test_profiles_list_and_check(tmp_path, monkeypatch, capsys):
    bad = tmp_path / "bad.toml"
    bad.write_text((SHIPPED_DIR / "generic-analyzer.toml").read_text()
                   .replace('name = "generic-analyzer"', 'name = "bad"')
                   .replace("[commands]", "[commands]\nsweep_speed = \"X\""))
    monkeypatch.setenv("BENCHFIT_PROFILES", str(tmp_path))
    code, stdout, _ = run(["profiles", "--json"], capsys)
    assert code == 0
    rows = {r["name"]: r for r in json.loads(stdout)["profiles"]}
    assert rows["generic-analyzer"]["valid"] and rows["generic-scope"]["kind"] == "scope"
    assert not rows["bad"]["valid"] and "commands.sweep_speed" in rows["bad"]["error"]
    code, stdout, _ = run(["profiles", "--check", "generic-analyzer"], capsys)
    assert code == 0 and stdout.startswith("ok: generic-analyzer (analyzer")
    code, _, err = run(["profiles", "--check", str(bad)], capsys)
    assert code == 2 and "unknown key commands.sweep_speed" in err


def _sim_yaml(tmp_path):
    # a plain pyvisa-sim definition (its own YAML format): one device answering *IDN?
    path = tmp_path / "devices.yaml"
    path.write_text(
        'spec: "1.1"\n'
        "devices:\n"
        "  meter:\n"
        "    eom:\n"
        "      TCPIP INSTR:\n"
        '        q: "\\n"\n'
        '        r: "\\n"\n'
        "    dialogues:\n"
        '      - q: "*IDN?"\n'
        '        r: "benchfit,bench meter,0001,1.0"\n'
        "resources:\n"
        "  TCPIP0::127.0.0.1::inst0::INSTR:\n"
        "    device: meter\n")
    return path


def test_instruments_with_pyvisa_sim_backend(tmp_path, capsys):
    backend = f"{_sim_yaml(tmp_path)}@sim"
    code, stdout, _ = run(["instruments", "--backend", backend, "--json"], capsys)
    assert code == 0
    assert json.loads(stdout)["resources"] == [{"resource": "TCPIP0::127.0.0.1::inst0::INSTR"}]
    code, stdout, _ = run(["instruments", "--backend", backend, "--identify"], capsys)
    assert code == 0
    assert stdout.strip() == "TCPIP0::127.0.0.1::inst0::INSTR  benchfit,bench meter,0001,1.0"


def test_instruments_none_found(tmp_path, capsys):
    backend = f"{_sim_yaml(tmp_path)}@sim"
    code, stdout, _ = run(["instruments", "--backend", backend, "--query", "USB?*::INSTR"], capsys)
    assert code == 0 and "no VISA resources found" in stdout


def test_instruments_identify_reports_a_silent_resource(tmp_path, capsys):
    path = _sim_yaml(tmp_path)
    path.write_text(path.read_text().replace('"*IDN?"', '"*IDN-NOT?"'))   # device ignores *IDN?
    code, stdout, _ = run(["instruments", "--backend", f"{path}@sim", "--identify", "--timeout", "0.2",
                           "--json"], capsys)
    assert code == 0
    (entry,) = json.loads(stdout)["resources"]
    assert "idn" not in entry and "no answer within 0.2 s" in entry["error"]
