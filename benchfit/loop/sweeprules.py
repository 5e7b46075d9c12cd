"""Named rules of the margins analysis that weigh evidence about the ends and gaps of a curve.

Each rule is one function with the evidence it weighs in its docstring, used by
:func:`benchfit.loop.marginscore.analyse` and tested on its own
(``tests/test_sweep_rules.py``).
"""

from __future__ import annotations

import numpy as np

from benchfit.loop.asymptote import MAX_INTEGRATORS, Asymptote
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


def given_count_conflict(low_end: Asymptote, n_given: int) -> bool:
    """Whether a sweep's low end rules out the integrator count the caller stated.

    Evidence weighed: the fit of the low-frequency asymptote
    (:func:`benchfit.loop.asymptote.choose_integrators`), which tries every whole n with
    the magnitude slope fixed at −20·n dB/decade *and* the asymptotic phase fixed at a
    multiple of 90° of n's parity, against the free fit.  The stated count conflicts
    with the data when it is not among the counts that fit allows (it costs at least
    :data:`~benchfit.loop.asymptote.DECIDE_CHI2` more than the best; a low end that has
    not reached its asymptote allows more counts).  The slope enters as well as the phase,
    so a count off by two (the same phase modulo 180°, a slope 40 dB/decade off) is caught
    like one off by one.  A count above :data:`~benchfit.loop.asymptote.MAX_INTEGRATORS`
    is judged by the slope alone: it conflicts when the fitted slope is more than 3σ and
    0.5 away from it.
    """
    if n_given > MAX_INTEGRATORS:
        return abs(low_end.slope_n - n_given) > 0.5 + 3.0 * low_end.slope_sigma
    return int(n_given) not in low_end.plausible


#: A gain margin deeper than this is of no design interest, so a phase gap below it is
#: not worth a warning (common practice, no source: margins are quoted to tens of dB).
GAP_FLOOR_DB = -60.0
#: A phase step between neighbouring points at least this large cannot be told apart
#: from the same change the other way round the circle (360° minus it) when it nears
#: 180°; from 90° on, a −180° crossing may lie in the gap (our own figure).
GAP_STEP_DEG = 90.0


def phase_gaps(db: np.ndarray, phase_step_deg: np.ndarray) -> np.ndarray:
    """Indices i where a phase crossing (and so the gain margin) may hide between
    points i and i+1 of a sweep.

    Evidence weighed: the unwrapped phase step between neighbours (at least
    :data:`GAP_STEP_DEG`: the unwrapping took the shorter way round, which near 180°
    is a guess, and a resonance or a gap in the sweep turns the phase by that much
    between two points) and the loop's magnitude there (the louder neighbour above
    :data:`GAP_FLOOR_DB`: deeper, no gain margin of interest is at stake).  The level
    the under-sampling warning of the live band uses (−20 dB) is not enough here: a
    gain margin of 15 dB sits between neighbours at −24 and −42 dB.
    """
    db = np.asarray(db, dtype=float)
    step = np.asarray(phase_step_deg, dtype=float)
    loud = np.maximum(db[:-1], db[1:]) > GAP_FLOOR_DB
    return np.flatnonzero(loud & (step >= GAP_STEP_DEG))


#: An interval of a sweep whose log-frequency step is at least this many times the sweep's
#: median step is a hole in it (our own figure: a sweep's spacing varies by a factor 2 or so
#: when an instrument changes range or an adaptive capture adds points).
HOLE_STEP_RATIO = 4.0


def modulus_gaps(log_f: np.ndarray, j_min: int, phase_gap_idx: np.ndarray) -> np.ndarray:
    """Indices i where |1 + T| may dip below its smallest sampled value unseen, between
    points i and i+1 of a sweep (so the modulus margin found is only an upper bound).

    Evidence weighed:

    * the phase gaps (:func:`phase_gaps`): the phase turns by 90° or more between two
      neighbours above −60 dB; a resonance peaks between them, or a phase crossing hides
      there, and either may bring T nearer −1 than any sampled point (a Q 20 resonance
      with its peak in a 30–55 kHz hole: sampled min |1 + T| 0.92, python-control's
      ``stability_margins`` on the true loop 0.73);
    * a hole beside the sampled minimum ``j_min``: an interval next to it whose step in
      log f is at least :data:`HOLE_STEP_RATIO` times the median step.  The sampled
      minimum then sits at the edge of a stretch nobody measured, with |1 + T| falling
      towards it (a 2–8 kHz hole in a 100 point/decade sweep: sampled 0.938 at 8.1 kHz,
      true 0.919 at 4 kHz).
    """
    out = {int(i) for i in np.asarray(phase_gap_idx, dtype=int)}
    steps = np.diff(np.asarray(log_f, dtype=float))
    if steps.size >= 2:
        med = float(np.median(steps))
        for i in (j_min - 1, j_min):
            if 0 <= i < steps.size and steps[i] >= HOLE_STEP_RATIO * med:
                out.add(i)
    return np.array(sorted(out), dtype=int)
