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
    f = np.logspace(1, 5, 401)
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
