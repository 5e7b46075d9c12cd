"""Phase margin from ζ against python-control's margins on the equivalent open loop."""

import json

import control
import numpy as np
import pytest

from benchfit.fitting.model import PlantModel
from benchfit.steps.fit import fit_step
from benchfit.steps.models import closed_loop_unit_step
from benchfit.steps.pm import (
    RULE_OF_THUMB_NOTE,
    PhaseMarginEstimate,
    crossover_ratio_from_zeta,
    estimate_phase_margin,
    phase_margin_from_zeta,
    zeta_from_phase_margin,
)


@pytest.mark.parametrize("zeta", [0.05, 0.2, 0.4, 0.6, 0.8, 1.0, 2.5])
def test_exact_relation_matches_control_stability_margins(zeta):
    # Reference: python-control stability_margins on L(s) = ωn²/(s(s+2ζωn)), whose closed loop
    # is the second-order ωn²/(s²+2ζωn s+ωn²) (textbook).
    wn = 2 * np.pi * 7e3
    loop = control.tf([wn**2], [1.0, 2 * zeta * wn, 0.0])
    _, pm, _, _, wc, _ = control.stability_margins(loop)
    assert phase_margin_from_zeta(zeta) == pytest.approx(pm, abs=1e-6)
    assert crossover_ratio_from_zeta(zeta) * wn == pytest.approx(wc, rel=1e-6)


def test_inverse_relation():
    for pm in (10.0, 45.0, 76.0, 89.0):
        assert phase_margin_from_zeta(zeta_from_phase_margin(pm)) == pytest.approx(pm, abs=1e-9)
    with pytest.raises(ValueError):
        zeta_from_phase_margin(95.0)


def test_vectorised_and_known_value():
    # ζ = 0.5 -> PM = 51.83 degrees (exact relation; value from memory, checked by the test above).
    out = phase_margin_from_zeta(np.array([0.5, 0.7]))
    assert out.shape == (2,)
    assert out[0] == pytest.approx(51.827, abs=1e-3)


def test_estimate_carries_rule_of_thumb_and_error():
    est = estimate_phase_margin(0.4, 0.01, 2e3)
    assert est.rule_of_thumb_deg == pytest.approx(40.0)  # 100·ζ, common practice, no source
    assert RULE_OF_THUMB_NOTE in est.notes
    slope = (phase_margin_from_zeta(0.401) - phase_margin_from_zeta(0.399)) / 0.002
    assert est.phase_margin_stderr_deg == pytest.approx(slope * 0.01, rel=1e-3)
    assert est.crossover_hz == pytest.approx(2e3 * crossover_ratio_from_zeta(0.4))
    assert PhaseMarginEstimate.from_dict(est.to_dict()).to_dict() == est.to_dict()


def test_end_to_end_step_of_a_loop_gives_its_margin():
    # A trace simulated from the closed loop of L = ωn²/(s(s+2ζωn)), fitted, gives back the phase
    # margin python-control computes on L (reference library), within the fit's uncertainty.
    zeta, wn = 0.35, 2 * np.pi * 4e3
    loop = PlantModel(zeros=[], poles=[0.0, -2 * zeta * wn], k=wn**2)
    t = np.linspace(-2e-4, 2e-3, 5000)
    u, _ = closed_loop_unit_step(t, loop)
    y = 0.5 + 0.1 * u + 1e-3 * np.random.default_rng(4).standard_normal(t.size)
    fit = fit_step((t, y))
    est = estimate_phase_margin(fit.value("zeta"), fit.stderr("zeta"), fit.value("fn_hz"))
    _, pm, _, _, wc, _ = control.stability_margins(control.tf([wn**2], [1, 2 * zeta * wn, 0]))
    assert abs(est.phase_margin_deg - pm) < 3 * est.phase_margin_stderr_deg + 0.05
    assert est.crossover_hz == pytest.approx(wc / (2 * np.pi), rel=0.01)


def test_zeta_not_determined_weighs_the_edge_resolution_and_the_sigma():
    from benchfit.steps.pm import MIN_RISE_SAMPLES, zeta_not_determined
    dt = 1e-6
    assert zeta_not_determined(0.5, 0.05, 20 * dt, dt) == ""
    assert "rises within" in zeta_not_determined(0.5, 0.05, 0.8 * dt, dt)
    assert zeta_not_determined(0.5, 0.05, MIN_RISE_SAMPLES * dt, dt) == ""
    assert "standard error" in zeta_not_determined(0.6, 4.3, 20 * dt, dt)
    assert zeta_not_determined(0.3, float("nan")) == ""  # a ζ of the log decrement: no σ


def test_an_estimate_from_an_undetermined_zeta_has_no_figure():
    from benchfit.fileio import to_json_text
    from benchfit.steps.pm import PhaseMarginEstimate, estimate_phase_margin
    e = estimate_phase_margin(0.6, 4.3, 1.2e6, not_determined="ζ = 0.6 ± 4.3")
    assert not e.determined and e.not_determined == "ζ = 0.6 ± 4.3"
    assert all(np.isnan(x) for x in (e.phase_margin_deg, e.phase_margin_stderr_deg,
                                     e.rule_of_thumb_deg, e.crossover_hz))
    d = json.loads(to_json_text(e.to_dict()))
    assert d["phase_margin_deg"] is None and d["rule_of_thumb_deg"] is None
    back = PhaseMarginEstimate.from_dict(d)
    assert back.not_determined == e.not_determined and not back.determined
    assert estimate_phase_margin(0.5, 0.05, 1e3).determined
