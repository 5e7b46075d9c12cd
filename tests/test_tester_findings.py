"""Findings of the tester session (2026-12-03) on main, written as checks that fail today.

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
    found = math.isfinite(m.gain_margin_db)
    assert found or any("coarse" in w or "jumps" in w for w in m.warnings)  # main: inf, no warning


def test_given_integrator_count_off_by_two_is_flagged():
    # A measured type-1 loop (low-frequency slope fitted 1.00 +- 0.00) given as 3 integrators:
    # python-control's closed loop is stable; the wrong count must at least be flagged.
    s = control.tf("s")
    t = (1 + s / _w(1e3)) ** 2 / (s * (1 + s / _w(100)) ** 2 * (1 + s / _w(50e3)) ** 2)
    loop = t / abs(complex(t(1j * _w(5e3))))
    assert max(control.poles(control.feedback(loop, 1)).real) < 0
    f = np.logspace(0, 6, 601)
    m = margins_from_data(f, _sample(loop, f), integrators=3)
    assert m.verdict == "stable" or any("asymptote" in w for w in m.warnings)  # main: silent
