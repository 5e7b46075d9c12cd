"""Named rules of the margins analysis that weigh evidence about the ends and gaps of a curve.

Each rule is one function with the evidence it weighs in its docstring, used by
:func:`benchfit.loop.marginscore.analyse` and tested on its own
(``tests/test_sweep_rules.py``).
"""

from __future__ import annotations

from benchfit.loop.asymptote import Asymptote
from benchfit.loop.crossings import wrap180

#: a model's first point (far below its corners) this close to 180° is T(0) < 0 (our own figure)
DC_MODEL_TOL_DEG = 1.0


def dc_phase_crossing(n_int: int, first_phase_deg: float, low_dev_deg: float,
                      low_end: Asymptote | None) -> bool:
    """Whether the bottom of the band is a phase crossing at f = 0 (T(0) real and negative).

    A loop without integrators whose gain at DC is negative (an open-loop-unstable
    plant with an inverting low end, T(0) = -2) has ∠T(0) = -180°: lowering the gain
    until |T(0)| < 1 changes the encirclement count, so f = 0 is a phase crossing
    with GM = -20·log10|T(0)| (python-control's ``stability_margins`` reports it at 0 Hz).

    Evidence weighed:

    * the integrator count ``n_int`` must be 0 (with integrators T(0) is infinite);
    * a sweep (``low_end`` given, the fit of its low-frequency asymptote,
      :mod:`benchfit.loop.asymptote`): the fit must have *decided* n = 0, which means
      the asymptotic phase fixed at the multiple of 180° nearest the free fit's costs
      at most its acceptance χ²; the crossing is there when that multiple is an odd
      one (the free phase nearer ±180° than 0°).  The first point's own phase is not
      used: a corner a decade above it still turns it by degrees;
    * a model (``low_end`` None, its band starting far below every corner): the first
      point's phase ``first_phase_deg`` within :data:`DC_MODEL_TOL_DEG` of 180° and
      ∠(1+T) there within as much of its asymptote (``low_dev_deg``).
    """
    if n_int != 0:
        return False
    if low_end is not None:
        return bool(low_end.decided and low_end.n == 0
                    and abs(float(wrap180(low_end.phase_deg + 180.0))) < 90.0)
    return bool(low_dev_deg < DC_MODEL_TOL_DEG
                and abs(float(wrap180(first_phase_deg + 180.0))) < DC_MODEL_TOL_DEG)
