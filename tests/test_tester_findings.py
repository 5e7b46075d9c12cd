"""Findings of the tester session (2026-12-03), kept as checks against python-control (they failed on main before the fixes).

Each check compares benchfit's margins of a sampled loop with python-control 0.10
(``stability_margins`` and ``feedback`` poles on the true transfer function).
"""

import math

import control
import numpy as np

from benchfit.loop.margins import margins_from_data


def _w(f_hz: float) -> float:
    return 2 * math.pi * f_hz


def _sample(sys_, f):
    return np.array([complex(sys_(1j * _w(x))) for x in f])


def test_gap_over_a_resonance_does_not_lose_the_phase_crossing_silently():
    # Resonance (Q = 10, 40 kHz) above a 1 kHz crossover; the sweep lacks 30-60 kHz.
    # Reference: python-control gives GM 15.42 dB at 38.5 kHz on the true loop.
    s = control.tf("s")
    wn = _w(40e3)
    t = 1 / (s * (1 + s / _w(50e3))) * (wn**2 / (s**2 + wn / 10 * s + wn**2))
    loop = t / abs(complex(t(1j * _w(1e3))))
    gm, *_ = control.stability_margins(loop, returnall=True)
    assert math.isclose(20 * math.log10(gm[0]), 15.42, abs_tol=0.01)
    f = np.logspace(0, 6, 601)
    f = f[(f < 30e3) | (f > 60e3)]
    m = margins_from_data(f, _sample(loop, f))
    # main said "no phase crossing" with no warning; the gap rule (sweeprules.phase_gaps) warns
    assert math.isfinite(m.gain_margin_db) or any("may lie in the gap" in w for w in m.warnings)
    # the full sweep finds the crossing python-control finds, and no gap warning
    f_all = np.logspace(0, 6, 601)
    m_all = margins_from_data(f_all, _sample(loop, f_all))
    # (within 0.2 dB: the sampled sweep is interpolated between points on the resonance's
    # steep phase, 100 points a decade)
    assert math.isclose(m_all.gain_margin_db, 15.42, abs_tol=0.2)
    assert not any("may lie in the gap" in w for w in m_all.warnings)
