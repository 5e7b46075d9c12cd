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


def test_gain_margin_with_a_gap_that_may_hide_a_crossing_is_not_reported_as_known():
    # Same loop as above. Reference: python-control's stability_margins gives GM 15.42 dB at
    # 38.5 kHz on the true loop; with 30-60 kHz missing from the sweep no number benchfit could
    # give is trustworthy, so the GM is "not determined" (NaN, JSON null-like) and says where.
    from benchfit.loop.marginsresult import Margins

    s = control.tf("s")
    wn = _w(40e3)
    t = 1 / (s * (1 + s / _w(50e3))) * (wn**2 / (s**2 + wn / 10 * s + wn**2))
    loop = t / abs(complex(t(1j * _w(1e3))))
    f = np.logspace(0, 6, 601)
    f = f[(f < 30e3) | (f > 60e3)]
    m = margins_from_data(f, _sample(loop, f))
    assert not m.gain_margin_known
    assert math.isnan(m.gain_margin_db)
    (lo, hi), = m.gain_margin_gaps_hz
    assert lo < 30e3 < 60e3 < hi and lo < 38.5e3 < hi      # the true crossing is inside
    assert m.gain_margin_text().startswith("not determined")
    back = Margins.from_dict(m.to_dict())
    assert back.gain_margin_gaps_hz == m.gain_margin_gaps_hz and not back.to_dict()["gain_margin_known"]
    # the full sweep: known, and equal to the reference within the sampling error
    f_all = np.logspace(0, 6, 601)
    m_all = margins_from_data(f_all, _sample(loop, f_all))
    assert m_all.gain_margin_known and m_all.to_dict()["gain_margin_gaps_hz"] == []
    assert math.isclose(m_all.gain_margin_db, 15.42, abs_tol=0.2)


def test_a_crossing_found_beside_a_gap_is_an_upper_bound():
    # Three poles at 10 kHz with gain 4 and a lightly damped resonance at 100 kHz (Q = 30)
    # whose 70-150 kHz stretch is missing from the sweep.  Reference: python-control's
    # stability_margins on the true loop, GM 5.67 dB at 17.2 kHz (the resonance's own
    # -180 deg crossing is far deeper).  The crossing found is that one, but benchfit cannot
    # know the gap holds no worse one: "or less", and not known.
    s = control.tf("s")
    p, wr = _w(10e3), _w(100e3)
    loop = 4 / (1 + s / p) ** 3 * (wr**2 / (s**2 + wr / 30 * s + wr**2))
    gm, *_ = control.stability_margins(loop, returnall=True)
    gm_ref = 20 * math.log10(min(gm))
    assert math.isclose(gm_ref, 5.67, abs_tol=0.01)
    f = np.logspace(2, 7, 801)
    f_gap = f[(f < 70e3) | (f > 150e3)]
    m = margins_from_data(f_gap, _sample(loop, f_gap))
    assert math.isclose(m.gain_margin_db, gm_ref, abs_tol=0.05)
    (lo, hi), = m.gain_margin_gaps_hz
    assert lo < 70e3 and hi > 150e3
    assert not m.gain_margin_known and " or less: " in m.gain_margin_text()
    # the full sweep: the same number, known
    m_all = margins_from_data(f, _sample(loop, f))
    assert m_all.gain_margin_known and math.isclose(m_all.gain_margin_db, gm_ref, abs_tol=0.05)
