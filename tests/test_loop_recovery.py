"""Loop gain recovered from closed-loop measurements, checked against python-control.

References: python-control (``control.feedback`` builds the closed loop and
the sensitivity of a known loop; its frequency response is the truth); the
feedback algebra of a non-inverting amplifier (G = A/(1 + Aβ)); Middlebrook
1975 for the injection formula T = (Tv·Ti − 1)/(Tv + Ti + 2), quoted from
memory, so it is ALSO derived here: the injection ratios are solved from the
node equations of a two-port loop with finite source and load impedances,
and T from the same loop's return ratio computed by python-control.
"""

import subprocess
import sys

import control
import numpy as np
import pytest

from benchfit.data import read_sweep
from benchfit.data.canonical import write_sweep_csv
from benchfit.data.response import FrequencyResponse
from benchfit.errors import InputError
from benchfit.loop.loop_recovery import (
    loop_from_closed_loop,
    loop_from_injection,
    loop_from_output_impedance,
)
from benchfit.loop.loopfile import margins_of_loop

S = control.tf("s")
F = np.logspace(1, 7, 181)


def fr(sys_tf, f=F, quantity="unknown"):
    return FrequencyResponse(freq_hz=f, response=np.array([complex(sys_tf(2j * np.pi * x)) for x in f]),
                             quantity=quantity)


def values(sys_tf, f=F):
    return np.array([complex(sys_tf(2j * np.pi * x)) for x in f])


def opamp_into_cap():
    """A = op-amp (A0 1e5, GBW 5 MHz, second pole 15 MHz) through Ro = 20 Ω into 1 µF, ESR 10 mΩ."""
    a = 1e5 / ((1 + S / (2 * np.pi * 50)) * (1 + S / (2 * np.pi * 15e6)))
    return a * (1 + S * 0.01e-6) / (1 + S * 20.01e-6)


def test_closed_loop_and_beta_give_the_loop_gain():
    a, beta = opamp_into_cap(), 0.4
    g = control.feedback(a, beta)          # non-inverting: G = A/(1 + Aβ)
    t = loop_from_closed_loop(fr(g), beta)
    np.testing.assert_allclose(t.response, values(a * beta), rtol=1e-7)
    assert t.quantity == "loop"
    # β given as a sweep (a lead network's β(s)) works the same
    b = (1 + S / (2 * np.pi * 1e5)) / (2.5 * (1 + S / (2 * np.pi * 2.5e5)))
    t2 = loop_from_closed_loop(fr(control.feedback(a, b)), fr(b))
    np.testing.assert_allclose(t2.response, values(a * b), rtol=1e-7)


def test_inverting_stage_with_its_ideal_gain():
    a, beta = opamp_into_cap(), 1 / 3.5
    t_true = a * beta
    g = -2.5 * control.feedback(t_true, 1)  # inverting: G = −(Rf/Rg)·T/(1 + T), Rf/Rg = 2.5
    t = loop_from_closed_loop(fr(g), ideal_gain=-2.5)
    np.testing.assert_allclose(t.response, values(t_true), rtol=1e-7)


def injection_ratios(g, zs, zl, f):
    """Tv and Ti of a two-port loop solved from its equations at each frequency.

    Loop: the driving side is a Thevenin source e = −g·v2 behind Zs; the driven side
    is an input impedance Zl across v2.  Voltage injection: a series source vz between
    v1 (driving side) and v2 (driven side).  Current injection: a shunt source iz
    into the joined node.
    """
    tv, ti = [], []
    for x in f:
        s = 2j * np.pi * x
        gv, zsv, zlv = complex(g(s)), complex(zs(s)), complex(zl(s))
        # unknowns v1, v2, i (driving side -> driven side): v2 - v1 = 1; Zl i = v2; v1 = -g v2 - Zs i
        m = np.array([[-1, 1, 0], [0, 1, -zlv], [1, gv, zsv]], dtype=complex)
        v1, v2, _ = np.linalg.solve(m, np.array([1, 0, 0], dtype=complex))
        tv.append(-v1 / v2)
        # unknowns v, i1 (out of the driving side), i2 (into the driven side):
        # Zs i1 = -g v - v; Zl i2 = v; i1 + 1 = i2
        m = np.array([[1 + gv, zsv, 0], [1, 0, -zlv], [0, 1, -1]], dtype=complex)
        v, i1, i2 = np.linalg.solve(m, np.array([0, 0, -1], dtype=complex))
        ti.append(-i1 / i2)
    return np.array(tv), np.array(ti)


@pytest.mark.parametrize("rs", [0.1, 50.0, 5e3])
def test_injection_formula_from_a_two_port_loop(rs):
    g = 2e4 / ((1 + S / (2 * np.pi * 100)) * (1 + S / (2 * np.pi * 3e5)))
    zs = rs + S * 1e-6                      # source: R + L
    zl = control.tf([1e3], [1e3 * 1e-9, 1])  # load: 1 kΩ ‖ 1 nF
    t_true = g * zl / (zs + zl)             # return ratio of the loop (break at the source e)
    tv, ti = injection_ratios(g, zs, zl, F)
    t = loop_from_injection(FrequencyResponse(F, tv), FrequencyResponse(F, ti))
    np.testing.assert_allclose(t.response, values(t_true), rtol=1e-7)
    # neither ratio alone is T unless the point is ideal
    if rs > 1:
        assert np.max(np.abs(tv / values(t_true) - 1)) > 1e-3


def test_output_impedance_ratio_gives_the_loop_gain():
    a, beta = opamp_into_cap(), 0.5
    t_true = a * beta
    z_ol = 20.0 * (1 + S * 0.01e-6) / (1 + S * 20.01e-6)   # Ro ‖ (ESR + 1/sC)... as a ratio
    z_cl = z_ol * control.feedback(1, t_true)               # Z_ol · S
    t = loop_from_output_impedance(fr(z_ol), fr(z_cl))
    np.testing.assert_allclose(t.response, values(t_true), rtol=1e-7)
    # and the margins of the recovered sweep agree with python-control's
    gm, pm, _, _ = control.margin(t_true)
    assert margins_of_loop(t).phase_margin_deg == pytest.approx(pm, abs=0.5)


def test_amplification_warning_names_the_noisy_stretch():
    from benchfit.loop.loop_recovery import amplification_warning

    a, beta = opamp_into_cap(), 0.4
    t = loop_from_closed_loop(fr(control.feedback(a, beta)), beta)   # |T| up to 4e4
    assert "mostly noise" in amplification_warning(t, "ratio")
    small = FrequencyResponse(F, np.full(F.size, 5.0 + 0j), quantity="loop")
    assert amplification_warning(small, "ratio") is None
    assert amplification_warning(t, "injection") is None


def test_different_grids_and_mistakes():
    a, beta = opamp_into_cap(), 0.4
    g = fr(control.feedback(a, beta))
    b = FrequencyResponse(np.logspace(2, 6, 50), np.full(50, beta))
    t = loop_from_closed_loop(g, b)
    assert t.f_min_hz >= 100 * (1 - 1e-9) and t.f_max_hz <= 1e6 * (1 + 1e-9)
    np.testing.assert_allclose(t.response, values(a * beta, t.freq_hz), rtol=1e-6)
    with pytest.raises(InputError, match="one of them"):
        loop_from_closed_loop(g)
    with pytest.raises(InputError, match="does not overlap"):
        loop_from_closed_loop(g, FrequencyResponse(np.array([1e8, 1e9]), np.array([0.4, 0.4])))


def run_cli(*args):
    return subprocess.run([sys.executable, "-m", "benchfit", *args], capture_output=True, text=True)


def test_cli_writes_a_loop_sweep_margins_and_fit_read(tmp_path):
    a, beta = opamp_into_cap(), 0.4
    write_sweep_csv(fr(control.feedback(a, beta), quantity="closed"), tmp_path / "g.csv")
    out = tmp_path / "t.csv"
    r = run_cli("loopgain", "--closed", str(tmp_path / "g.csv"), "--beta", "0.4", "-o", str(out))
    assert r.returncode == 0, r.stderr
    t = read_sweep(out)
    # 13-digit CSV numbers, and T = x/(1 − x) with x near 1 where T is large: 1e-6
    np.testing.assert_allclose(t.response, values(a * beta), rtol=1e-6)
    r = run_cli("margins", str(out), "--json")
    assert r.returncode == 0, r.stderr
    r = run_cli("fit", str(out), "-o", str(tmp_path / "fit.json"))
    assert r.returncode == 0, r.stderr
    # injection and impedance pairs through the command too
    tv, ti = injection_ratios(a * 0.4, 10 + S * 0, control.tf([1e4], [1]), F)
    write_sweep_csv(FrequencyResponse(F, tv), tmp_path / "tv.csv")
    write_sweep_csv(FrequencyResponse(F, ti), tmp_path / "ti.csv")
    r = run_cli("loopgain", "--tv", str(tmp_path / "tv.csv"), "--ti", str(tmp_path / "ti.csv"),
                "-o", str(out))
    assert r.returncode == 0, r.stderr
    np.testing.assert_allclose(read_sweep(out).response, values(a * 0.4 * 1e4 / (1e4 + 10)), rtol=1e-7)
    r = run_cli("loopgain", "--tv", str(tmp_path / "tv.csv"), "-o", str(out))
    assert r.returncode == 2 and "--ti" in r.stderr
    r = run_cli("loopgain", "--closed", str(tmp_path / "g.csv"), "--beta", "abc", "-o", str(out))
    assert r.returncode == 2 and "--beta" in r.stderr


def test_noise_limited_keeps_points_within_the_bound():
    from benchfit.loop.loop_recovery import MAX_RECOVERED_ERROR, noise_limited

    err = np.array([0.0, 0.05, MAX_RECOVERED_ERROR, 0.11, 5.0, np.nan, np.inf])
    assert list(noise_limited(err)) == [True, True, True, False, False, False, False]
    assert list(noise_limited(err, bound=1.0)) == [True, True, True, True, False, False, False]


def test_noisy_closed_loop_drops_the_noise_amplified_points_and_keeps_the_verdict():
    # A = 1e5/((1+s/w50)(1+s/w3M)), beta = 0.4, 0.1 % complex noise on G: below ~20 kHz
    # |1+T| > 100 and sigma*|1+T| > 0.1, so T there is noise (raw: random phase, counts of -5)
    from benchfit.loop.loop_recovery import noise_drop_warning

    f = np.logspace(1, 7, 401)
    a = 1e5 / ((1 + S / (2 * np.pi * 50)) * (1 + S / (2 * np.pi * 3e6)))
    g = values(control.feedback(a, 0.4), f)
    # truth: python-control margins of the true loop A*beta (PM 60.0 deg at 1.73 MHz), stable:
    # the closed-loop poles (python-control feedback) are in the left half-plane
    _, pm, _, wpm = control.margin(a * 0.4)
    assert np.all(np.real(control.poles(control.feedback(a * 0.4, 1))) < 0)
    rng = np.random.default_rng(11)
    for _ in range(6):
        noise = 1e-3 * (rng.standard_normal(f.size) + 1j * rng.standard_normal(f.size))
        t = loop_from_closed_loop(FrequencyResponse(f, g * np.exp(noise)), 0.4)
        w = noise_drop_warning(t)
        assert w is not None and "is noise" in w
        st = t.provenance.settings
        assert st["noise_sigma"] == pytest.approx(1e-3, rel=0.2)   # the scatter's own estimate
        assert 5e3 < st["noisy_to_hz"] < 1e5 and st["noisy_from_hz"] == pytest.approx(10)
        tt = values(a * 0.4, t.freq_hz)
        assert np.max(np.abs(t.response / tt - 1)) < 0.5     # what is kept is T, not noise
        m = margins_of_loop(t)
        assert m.verdict in ("stable", "undecided"), m.integrators_evidence
        assert m.phase_margin_deg == pytest.approx(pm, abs=1.0)
        assert m.crossover_hz == pytest.approx(wpm / (2 * np.pi), rel=0.02)
    # noiseless data keep every point
    t = loop_from_closed_loop(FrequencyResponse(f, g), 0.4)
    assert len(t) == f.size and noise_drop_warning(t) is None
