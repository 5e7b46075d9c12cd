"""`benchfit predict`: each curve of a design against python-control / scipy.signal references."""

from __future__ import annotations

import json

import control
import numpy as np
import pytest
from scipy import signal

from benchfit.cli import main
from benchfit.fitting.model import PlantModel
from benchfit.loop.design import design
from benchfit.loop.loopgain import LoopPlant
from benchfit.loop.sensing import Sensing
from benchfit.loop.synthesis import Targets
from benchfit.output.curves import read_curve_csv

W = 2 * np.pi
BETA_DIVIDER = (10e3, 3.24e3)
BETA = 3.24 / 13.24


def _plant(delay_s: float = 0.0) -> PlantModel:
    w0, q, wz = W * 5e3, 2.0, W * 80e3
    return PlantModel(zeros=[-wz], poles=np.roots([1, w0 / q, w0 ** 2]), k=12.0 * w0 ** 2 / wz, delay_s=delay_s)


def _zol() -> PlantModel:
    # (rL + sL) || (ESR + 1/sC), L 10 uH, rL 30 mohm, C 100 uF, ESR 20 mohm: a buck's open-loop output
    rl, L, esr, C = 0.03, 10e-6, 0.02, 100e-6
    num = np.polymul([L, rl], [esr * C, 1])             # (rL + sL)(1 + s ESR C)
    den = np.polyadd(np.polymul([L, rl], [C, 0]), [esr * C, 1])  # sC(rL + sL) + 1 + s ESR C
    z, p, k = signal.tf2zpk(num, den)
    return PlantModel(zeros=z, poles=p, k=k)


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    d = tmp_path_factory.mktemp("pred")
    out = {}
    for tag, delay in (("nodelay", 0.0), ("delay", 1.5e-7)):
        lp = LoopPlant(_plant(delay), Sensing.divider(*BETA_DIVIDER), name="buck")
        des = design(lp, "type3", Targets(crossover_hz=20e3, phase_margin_deg=50), draws=0)
        p = d / f"design_{tag}.json"
        des.to_json(p)
        out[tag] = p
    z = d / "zol.json"
    _zol().to_json(z)
    out["zol"] = z
    out["dir"] = d
    return out


def _tf(d: dict) -> control.TransferFunction:
    z = np.array([complex(*v) for v in d["zeros"]])
    p = np.array([complex(*v) for v in d["poles"]])
    b, a = signal.zpk2tf(z, p, d["k"])
    return control.tf(np.real(b), np.real(a))


def _predict(files, tag, curve, *extra):
    out = files["dir"] / f"{tag}_{curve}.csv"
    assert main(["predict", str(files[tag]), "--curve", curve, "-o", str(out), *extra]) == 0
    return read_curve_csv(out)


def test_loop_curve_matches_scipy_with_exact_delay(files):
    c = _predict(files, "delay", "loop")
    d = json.loads(files["delay"].read_text())["loop_model"]["snapped"]
    z = np.array([complex(*v) for v in d["zeros"]])
    p = np.array([complex(*v) for v in d["poles"]])
    # reference: scipy.signal.freqs_zpk for the rational part times exp(-j w tau)
    _, h = signal.freqs_zpk(z, p, d["k"], worN=W * c.x)
    h = h * np.exp(-1j * W * c.x * d["delay_s"])
    np.testing.assert_allclose(c.y, h, rtol=1e-9)


def test_closed_loop_curve_is_t_over_one_plus_t_over_beta(files):
    c = _predict(files, "nodelay", "closed")
    d = json.loads(files["nodelay"].read_text())
    T = _tf(d["loop_model"]["snapped"])
    # reference: python-control's feedback(T, 1) = T/(1+T), scaled by 1/beta (ideal closed loop)
    ref = control.feedback(T, 1).frequency_response(W * c.x).complex.reshape(-1) / BETA
    np.testing.assert_allclose(c.y, ref, rtol=1e-6)
    # an integrator in T: |Vout/Vref| -> 1/beta at low frequency (final-value theorem)
    assert abs(c.y[0]) == pytest.approx(1 / BETA, rel=1e-3)


def test_step_curve_final_value_and_shape_match_python_control(files):
    c = _predict(files, "nodelay", "step", "--step", "50m")
    assert c.unit == "V" and not c.is_frequency
    d = json.loads(files["nodelay"].read_text())
    cl = control.feedback(_tf(d["loop_model"]["snapped"]), 1) * (0.05 / BETA)
    _, y = control.step_response(cl, c.x)
    assert c.y[-1] == pytest.approx(0.05 / BETA, rel=0.01)
    assert np.max(np.abs(c.y - y)) < 0.01 * 0.05 / BETA


def test_zout_and_load_step_against_python_control(files, capsys):
    zc = _predict(files, "nodelay", "zout", "--zout", str(files["zol"]))
    d = json.loads(files["nodelay"].read_text())
    T = _tf(d["loop_model"]["snapped"])
    zol = _tf(json.loads(files["zol"].read_text()))
    # Zcl = Zol / (1 + T) = Zol * feedback(1, T)
    ref_sys = zol * control.feedback(1, T)
    ref = ref_sys.frequency_response(W * zc.x).complex.reshape(-1)
    np.testing.assert_allclose(zc.y, ref, rtol=1e-6)
    ls = _predict(files, "nodelay", "load_step", "--zout", str(files["zol"]), "--load-step", "2")
    _, v = control.step_response(-2.0 * ref_sys, ls.x)
    # the first sample of v is 0 in python-control (step applied just after t=0); compare after it
    assert np.min(ls.y) == pytest.approx(np.min(v), rel=0.02)
    assert np.max(np.abs(ls.y[1:] - v[1:])) < 0.02 * abs(np.min(v))
    assert main(["predict", str(files["nodelay"]), "--curve", "load_step", "-o",
                 str(files["dir"] / "x.csv")]) == 2
    assert "needs the open-loop output impedance" in capsys.readouterr().err


def test_load_step_from_an_impedance_sweep_fits_it_first(files):
    from benchfit.data import FrequencyResponse, write_sweep_csv

    f = np.logspace(1, 6, 201)
    sweep = files["dir"] / "zol.csv"
    write_sweep_csv(FrequencyResponse(freq_hz=f, response=_zol().response(f), quantity="impedance"), sweep)
    from_sweep = _predict(files, "nodelay", "load_step", "--zout", str(sweep))
    from_model = _predict(files, "nodelay", "load_step", "--zout", str(files["zol"]))
    # a noiseless sweep of the same impedance: the fitted model gives the same peak deviation
    assert np.min(from_sweep.y) == pytest.approx(np.min(from_model.y), rel=0.01)
