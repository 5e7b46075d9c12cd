"""The named rules of :mod:`benchfit.loop.sweeprules`, each on its own evidence.

References: python-control 0.10 ``stability_margins`` on the true transfer function
(named at each check); the rules' own thresholds are our own (said where used).
"""

from benchfit.loop.asymptote import Asymptote
from benchfit.loop.sweeprules import dc_phase_crossing


def _asym(n=0, decided=True, phase=-180.0):
    return Asymptote(n=n, decided=decided, plausible=(n,), slope_n=float(n), slope_sigma=0.001,
                     phase_deg=phase, f_lo_hz=1.0, f_hi_hz=10.0)


def test_dc_phase_crossing_needs_no_integrator_and_an_inverting_decided_low_end():
    # a sweep: the decided asymptote's phase, not the first point's (a corner above it
    # still turns the first point by degrees)
    assert dc_phase_crossing(0, -170.0, 5.0, _asym(phase=-179.5))
    assert dc_phase_crossing(0, -170.0, 5.0, _asym(phase=178.0))
    assert not dc_phase_crossing(0, -180.0, 0.0, _asym(phase=-3.0))         # T(0) > 0
    assert not dc_phase_crossing(0, -180.0, 0.0, _asym(decided=False))      # low end unsure
    assert not dc_phase_crossing(1, -180.0, 0.0, _asym(n=1, phase=-270.0))  # T(0) infinite
    # a model: its first point, far below every corner, within 1 deg of 180 deg
    assert dc_phase_crossing(0, -179.5, 0.2, None)
    assert not dc_phase_crossing(0, -178.0, 0.2, None)
    assert not dc_phase_crossing(0, -179.5, 3.0, None)
