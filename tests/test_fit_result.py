"""FitResult: JSON round trip, report, parameters <-> zpk, and the `benchfit fit` command."""

import json
import subprocess
import sys

import numpy as np
import pytest
from scipy import signal

from benchfit.cli import main
from benchfit.data import write_sweep_csv
from benchfit.errors import InputError
from benchfit.fitting import fit
from benchfit.fitting.parameters import from_zpk, log_jacobian, response, to_zpk
from benchfit.fitting.result import STAT_KEYS, FitResult
from benchfit.fitting.synthetic import converter_plant, from_factors, sweep


@pytest.fixture(scope="module")
def result():
    m = from_factors(4.0, poles_hz=(2e3,), pairs=((30e3, 2.5),), zeros_hz=(90e3,), delay_s=0.0)
    return fit(sweep(m, np.geomspace(100, 1e6, 400), noise_db=0.05, noise_deg=0.3,
                     rng=np.random.default_rng(1)), delay="none")


def test_json_round_trip(result, tmp_path):
    p = tmp_path / "fit.json"
    result.to_json(p)
    back = FitResult.from_json(p)
    assert [x.to_dict() for x in back.parameters] == [x.to_dict() for x in result.parameters]
    assert np.allclose(back.covariance, result.covariance)
    assert np.allclose(back.model.poles, result.model.poles)
    f = np.geomspace(100, 1e6, 7)
    assert np.allclose(back.draw_responses(f, 5, np.random.default_rng(2)),
                       result.draw_responses(f, 5, np.random.default_rng(2)))
    d = json.loads(p.read_text())
    assert set(STAT_KEYS) <= set(d["stats"])
    for key in ("rms_db", "rms_deg", "max_db", "max_deg", "reduced_chi2", "order", "converged"):
        assert key in d["fit"]
    assert all(len(z) == 2 for z in d["model"]["poles"])


def test_from_json_rejects_other_files(tmp_path):
    p = tmp_path / "x.json"
    p.write_text('{"kind": "something"}')
    with pytest.raises(InputError, match="x.json"):
        FitResult.from_json(p)


def test_report_is_compact_and_complete(result):
    text = result.report()
    for name in ("gain", "pole1_hz", "pair1_f0_hz", "pair1_q", "zero1_hz"):
        assert name in text
    assert "residual" in text and "noise floor" in text and "reduced chi2" in text
    assert len(text.splitlines()) < 25


def test_parameters_round_trip_and_jacobian():
    m = converter_plant(delay_s=80e-9)
    st, v = from_zpk(m.zeros, m.poles, m.k, m.delay_s)
    z, p, k, tau = to_zpk(st, v)
    assert np.allclose(np.sort_complex(p), np.sort_complex(m.poles), rtol=1e-12)
    assert k == pytest.approx(m.k, rel=1e-12) and tau == m.delay_s
    s = 2j * np.pi * np.geomspace(10, 1e7, 50)
    # Factored form equals the zpk model (reference: scipy.signal.freqs_zpk).
    _, ref = signal.freqs_zpk(m.zeros, m.poles, m.k, worN=s.imag)
    assert np.allclose(response(st, v, s), ref * np.exp(-s * m.delay_s), rtol=1e-10)
    # Analytic Jacobian against central differences of the log response.
    jac = log_jacobian(st, v, s)
    for i in range(v.size):
        dv = 1e-6 * abs(v[i])
        up, dn = v.copy(), v.copy()
        up[i] += dv
        dn[i] -= dv
        num = (np.log(response(st, up, s)) - np.log(response(st, dn, s))) / (2 * dv)
        num = num.real + 1j * (np.angle(response(st, up, s) / response(st, dn, s)) / (2 * dv))
        assert np.allclose(jac[:, i], num, rtol=1e-5, atol=1e-9 * np.max(np.abs(jac[:, i]))), st.names[i]


def _write(tmp_path, m, **kw):
    p = tmp_path / "sweep.csv"
    write_sweep_csv(sweep(m, np.geomspace(100, 1e6, 300), **kw), p)
    return p


def test_cli_json_and_output_file(tmp_path, capsys):
    m = from_factors(4.0, poles_hz=(2e3,), pairs=((30e3, 2.5),), zeros_hz=(90e3,))
    src = _write(tmp_path, m, noise_db=0.05, noise_deg=0.3, rng=np.random.default_rng(3))
    out = tmp_path / "model.json"
    assert main(["fit", str(src), "--json", "-o", str(out), "--delay", "none"]) == 0
    d = json.loads(capsys.readouterr().out)
    assert d["fit"]["order"] == 3 and d["fit"]["converged"] is True
    names = [p["name"] for p in d["parameters"]]
    assert names == ["gain", "pole1_hz", "pair1_f0_hz", "pair1_q", "zero1_hz"]
    assert {"name", "value", "stderr", "unit"} <= set(d["parameters"][0])
    assert d["model"]["delay_s"] == 0.0 and len(d["model"]["poles"]) == 3
    assert FitResult.from_json(out).stats["order"] == 3


def test_cli_options_fix_band_order(tmp_path, capsys):
    m = from_factors(4.0, poles_hz=(2e3,), pairs=((30e3, 2.5),), zeros_hz=(90e3,))
    src = _write(tmp_path, m)
    assert main(["fit", str(src), "--order", "3", "--delay", "none", "--band", "200:500k",
                 "--fix", "zero1_hz=90k", "--json"]) == 0
    d = json.loads(capsys.readouterr().out)
    zero = next(p for p in d["parameters"] if p["name"] == "zero1_hz")
    assert zero["value"] == 90e3 and zero["fixed"] is True
    assert d["stats"]["f_min_hz"] >= 200 and d["stats"]["f_max_hz"] <= 500e3


def test_cli_bound_holds_a_parameter_inside_its_limits(tmp_path, capsys):
    # The zero sits at 90 kHz; limited to 50..80 kHz it must end on the 80 kHz edge, and the
    # open range keeps the pair's Q at or under 10.
    m = from_factors(4.0, poles_hz=(2e3,), pairs=((30e3, 2.5),), zeros_hz=(90e3,))
    src = _write(tmp_path, m, noise_db=0.05, noise_deg=0.3, rng=np.random.default_rng(3))
    assert main(["fit", str(src), "--order", "3", "--delay", "none", "--bound", "zero1_hz=50k:80k",
                 "--bound", "pair1_q=:10", "--json"]) == 0
    d = json.loads(capsys.readouterr().out)
    value = {p["name"]: p["value"] for p in d["parameters"]}
    assert 50e3 <= value["zero1_hz"] <= 80e3 and value["zero1_hz"] == pytest.approx(80e3, rel=1e-3)
    assert 0 < value["pair1_q"] <= 10
    assert d["provenance"]["settings"]["bounds"]["zero1_hz"] == [50e3, 80e3]


@pytest.mark.parametrize("args, message", [
    (["--bound", "zero1_hz=5k"], "--bound"),
    (["--bound", "zero1_hz=20k:5k"], "low limit must be below"),
    (["--bound", "nope_hz=1:2"], "--bound: no parameter"),
    (["--order", "x"], "--order"),
    (["--delay", "later"], "--delay"),
    (["--fix", "zero1_hz"], "--fix"),
    (["--band", "5M:6M"], "--band"),
    (["--fix", "nope_hz=3"], "no parameter"),
])
def test_cli_user_errors_are_one_line(tmp_path, args, message):
    m = from_factors(4.0, poles_hz=(2e3,), pairs=((30e3, 2.5),))
    src = _write(tmp_path, m)
    r = subprocess.run([sys.executable, "-m", "benchfit", "fit", str(src), "--delay", "none", *args],
                       capture_output=True, text=True)
    assert r.returncode == 2
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("benchfit: error:") and message in lines[0]
    assert "Traceback" not in r.stderr


def test_cli_text_report_and_warnings_on_stderr(tmp_path):
    # A 3-pole plant forced to order 1: residual far above the floor must warn on stderr.
    m = from_factors(4.0, poles_hz=(2e3,), pairs=((30e3, 2.5),))
    src = _write(tmp_path, m, noise_db=0.05, noise_deg=0.3, rng=np.random.default_rng(4))
    r = subprocess.run([sys.executable, "-m", "benchfit", "fit", str(src), "--order", "1",
                        "--delay", "none"], capture_output=True, text=True)
    assert r.returncode == 0
    assert "pole1_hz" in r.stdout
    assert "benchfit: warning: residual above the noise" in r.stderr


def test_routine_simplifications_are_notes_not_warnings(result, tmp_path):
    # Vector fitting of a 3-pole, 1-zero plant returns spare zeros far above the band; dropping
    # them is routine (a note in the report and the JSON), not something to act on.  A warning
    # stays for what needs the user (see test_cli_text_report_and_warnings_on_stderr).
    assert result.warnings == ()
    assert any("above the band that the data do not need" in n or "cost less than the noise" in n
               for n in result.notes), result.notes
    assert "  note: " in result.report()
    p = tmp_path / "fit.json"
    result.to_json(p)
    assert FitResult.from_json(p).notes == result.notes
    assert json.loads(p.read_text())["notes"] == list(result.notes)
