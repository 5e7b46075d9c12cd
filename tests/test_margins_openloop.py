"""A raw loop sweep of an open-loop-unstable loop is not called stable when P is not given."""

import control as ct
import numpy as np
import pytest

import benchfit.fitting
from benchfit.data import FrequencyResponse
from benchfit.loop.loopfile import margins_of_loop
from benchfit.loop.openloop import (
    RISE_SUSPECT_DEG,
    OpenLoopEvidence,
    excess_phase_rise,
    minimum_phase_deg,
    rhp_verdict,
)
from benchfit.provenance import Provenance

W = 2 * np.pi
s = ct.tf("s")


def _sweep(sys_, f, noise=0.002, seed=4):
    rng = np.random.default_rng(seed)
    T = sys_(2j * np.pi * f) * np.exp(noise * (rng.standard_normal(f.size)
                                               + 1j * rng.standard_normal(f.size)))
    return FrequencyResponse(freq_hz=f, response=T, quantity="loop",
                             provenance=Provenance(step="test"))


def _ct_closed_loop_stable(sys_):
    # Reference: python-control feedback(T, 1) poles (the closed loop of the return ratio T).
    return bool(np.all(ct.poles(ct.feedback(sys_, 1)).real < 0))


def test_rule_needs_fitted_and_demanded_rhp_poles():
    assert rhp_verdict(OpenLoopEvidence(rise_deg=170, suspect=True, fitted=True, rhp_poles=2,
                                        demanded=True, bic_margin=900)) == 2
    assert rhp_verdict(OpenLoopEvidence(rise_deg=170, suspect=True, fitted=True, rhp_poles=1,
                                        demanded=False, bic_margin=3)) is None
    assert rhp_verdict(OpenLoopEvidence(rise_deg=170, suspect=True, fitted=True, rhp_poles=0)) is None
    assert rhp_verdict(OpenLoopEvidence(rise_deg=10, suspect=False)) is None


def test_minimum_phase_matches_the_true_phase_of_a_stable_loop():
    # Bode gain-phase relation: a stable minimum-phase loop's phase follows from its magnitude;
    # checked against python-control's frequency response of the same true loop.
    sys_ = 2e3 * W * (1 + s / (W * 300)) / (s * (1 + s / (W * 20e3)) * (1 + s / (W * 80e3)))
    f = np.logspace(0, 7, 1401)
    fr = ct.frequency_response(sys_, W * f)
    est = minimum_phase_deg(f, np.asarray(fr.magnitude).ravel())
    inner = (f > 30) & (f < 3e5)           # away from the band's ends
    assert np.max(np.abs(est[inner] - np.degrees(np.asarray(fr.phase).ravel()[inner]))) < 1.0


@pytest.mark.parametrize("sys_", [
    3 / (1 + s / (W * 20e3 * 30) + (s / W / 20e3) ** 2) / (1 + s / (W * 130e3)),   # Q=30 pair
    5e3 * W / s / (1 + s / (W * 40e3)) * ct.tf(*ct.pade(2e-6, 8)),                   # delay
    8 * (1 - s / (W * 30e3)) / (1 + s / (W * 400)),                                    # RHP zero
    (W * 1e3) ** 2 * (1 + s / (W * 200)) / s ** 2 / (1 + s / (W * 10e3)),             # 2 integrators
])
def test_screen_passes_stable_loops(sys_):
    f = np.logspace(1, 5, 401)
    assert excess_phase_rise(f, _sweep(sys_, f).response) < RISE_SUSPECT_DEG


def test_stable_loop_is_not_fitted(monkeypatch):
    def no_fit(*a, **k):
        raise AssertionError("a sweep that passes the screen must not be fitted")

    monkeypatch.setattr(benchfit.fitting, "fit", no_fit)
    sys_ = 2e3 * W * (1 + s / (W * 300)) / (s * (1 + s / (W * 20e3)))
    # up to 1 MHz: the crossover is at 133 kHz (a sweep that ends with |T| > 1 is undecided,
    # loop.verdict.open_at_top)
    f = np.logspace(1, 6, 501)
    m = margins_of_loop(_sweep(sys_, f))
    assert (m.verdict == "stable") == _ct_closed_loop_stable(sys_) and m.verdict == "stable"


@pytest.mark.parametrize("sys_,truly_stable", [
    # 10 / ((s/ω1k - 1)(1 + s/ω40k)): one open-loop RHP pole, a STABLE closed loop, which
    # P = 0 would call unstable
    (10 / ((s / (W * 1e3) - 1) * (1 + s / (W * 40e3))), True),
    # 2 / ((1 - s/ω500)(1 + s/ω20k)): one open-loop RHP pole, an UNSTABLE closed loop, which
    # P = 0 called stable (PM -122°)
    (2 / ((1 - s / (W * 500)) * (1 + s / (W * 20e3))), False),
])
def test_open_loop_unstable_sweep_is_undecided_then_right_with_the_count(sys_, truly_stable):
    f = np.logspace(1, 5.3, 431)
    resp = _sweep(sys_, f)
    assert excess_phase_rise(f, resp.response) > 150
    m = margins_of_loop(resp)
    assert m.verdict == "undecided" and not m.closed_loop_stable
    assert "--unstable-poles 1" in m.warnings[0]
    assert _ct_closed_loop_stable(sys_) == truly_stable
    told = margins_of_loop(resp, unstable_open_loop_poles=1)
    assert told.verdict == ("stable" if truly_stable else "unstable")


@pytest.mark.parametrize("noise", [0.0, 0.002])
def test_open_loop_unstable_sweep_reports_the_gain_reduction_limit_at_dc(noise):
    # T(0) = -2 (P = 1): lowering the gain by 6.06 dB destabilises the loop.
    # Reference: python-control stability_margins gives GM -6.056 dB at 0 Hz on the true
    # loop, and the closed-loop poles of feedback(10**(-6.2/20) T) are in the right
    # half-plane (tester finding 3: the sweep path said "gain margin not defined", -inf).
    t = (1 + s / (W * 100)) / ((s / (W * 50) - 1) * (1 + s / (W * 20e3)))
    loop = t / abs(complex(t(1j * W * 2e3)))
    gm, *_ = ct.stability_margins(loop, returnall=True)
    assert np.isclose(20 * np.log10(gm[0]), -6.056, atol=0.01)
    assert max(ct.poles(ct.feedback(loop * 10 ** (-6.2 / 20), 1)).real) > 0
    assert max(ct.poles(ct.feedback(loop * 10 ** (-5.9 / 20), 1)).real) < 0
    f = np.logspace(0, 6, 601)
    m = margins_of_loop(_sweep(loop, f, noise=noise), unstable_open_loop_poles=1)
    assert m.verdict == "stable"
    assert np.isclose(m.gain_reduction_margin_db, 20 * np.log10(gm[0]), atol=0.05)
    dc = [c for c in m.crossings if c["kind"] == "phase" and c["freq_hz"] == 0.0]
    assert len(dc) == 1 and np.isclose(dc[0]["value"], m.gain_reduction_margin_db)
    assert any("lowering it by 6.1 dB" in w for w in m.warnings)
