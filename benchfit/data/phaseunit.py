"""Whether a sweep's phase column holds degrees or radians.

A header that names the unit is believed unless the numbers contradict it;
a column that names none is read by the evidence.  The evidence is Bode's
gain-phase relation: for a minimum-phase part the phase follows from the
magnitude,

    φ(ω0) = (1/π) ∫ (d ln|H| / du) · ln coth(|u|/2) du,   u = ln(ω/ω0)

(H. W. Bode, *Network Analysis and Feedback Amplifier Design*, 1945, ch. XIV;
also Åström & Murray, *Feedback Systems*, 2008, sec. 10.4).  The phase column
read in the right unit follows the magnitude's prediction up to a constant
(an inversion) and the lag of any delay; read in the wrong unit it is
57.3 times too large or too small.  :func:`bode_phase` makes the prediction,
:func:`phase_unit_evidence` weighs the two readings and
:func:`decide_phase_unit` is the rule the sweep reader applies.
"""

from __future__ import annotations

import math

import numpy as np

from benchfit.data.columns import Column
from benchfit.data.quote import quote

#: How many times better one reading must follow the magnitude than the other to count
#: as evidence (our own threshold: the wrong unit is off by a factor 57.3).
DECISIVE = 3.0
#: Deviations below this (radians, 0.57°: a few times the phase noise of a measured sweep) are
#: no evidence; our own threshold.  Without it two near-perfect readings would be told apart
#: by noise: 0.3° of phase noise in a radians column is 0.005° read as degrees.
FLOOR_RAD = 1e-2
#: Points of the log-frequency grid the relation is evaluated on (the integral is O(n²)).
_GRID = 400


def _kernel_integral(x: np.ndarray) -> np.ndarray:
    """G(x) = ∫_0^x ln coth(u/2) du for x ≥ 0 (G(∞) = π²/4).

    ln coth(u/2) = -ln(u/2) - ln(tanh(u/2)/(u/2)); the first part integrates to
    x - x·ln(x/2), the second is smooth and is summed by the trapezoid rule.
    """
    x = np.asarray(x, dtype=float)
    top = float(np.max(x)) if x.size else 0.0
    u = np.linspace(0.0, max(top, 1e-9), 4001)
    with np.errstate(divide="ignore", invalid="ignore"):
        smooth = np.where(u > 0, -np.log(np.tanh(u / 2) / (u / 2)), 0.0)
    cum = np.concatenate([[0.0], np.cumsum((smooth[1:] + smooth[:-1]) / 2 * np.diff(u))])
    with np.errstate(divide="ignore", invalid="ignore"):
        singular = np.where(x > 0, x - x * np.log(x / 2), 0.0)
    return singular + np.interp(x, u, cum)


def bode_phase(freq_hz: np.ndarray, mag_db: np.ndarray) -> np.ndarray:
    """The minimum-phase phase (radians) that Bode's gain-phase relation gives for a magnitude.

    Evaluated on a log grid of at most 400 points across the sweep and
    interpolated back; beyond the band the end slopes are taken to go on
    (an integrator's -20 dB/decade gives -π/2 at every frequency).

    Parameters
    ----------
    freq_hz
        Positive, strictly increasing frequencies.
    mag_db
        Magnitude at those frequencies, dB.
    """
    lf = np.log(np.asarray(freq_hz, dtype=float))
    m = np.asarray(mag_db, dtype=float) * (math.log(10) / 20)  # ln|H|
    n = int(min(_GRID, max(lf.size, 50)))
    u = np.linspace(lf[0], lf[-1], n)
    du = u[1] - u[0]
    slope = np.gradient(np.interp(u, lf, m), du)
    # weight of cell k seen from point i: ∫ over the cell of ln coth(|u - u_i|/2)
    d = np.abs(u[None, :] - u[:, None])
    lo, hi = np.maximum(d - du / 2, 0.0), d + du / 2
    g_lo, g_hi = _kernel_integral(lo), _kernel_integral(hi)
    w = np.where(d < du / 2, g_hi + _kernel_integral(du / 2 - d), g_hi - g_lo)
    inner = (w * slope[None, :]).sum(axis=1)
    # the end slopes continued to ±∞
    total = math.pi ** 2 / 4
    tail_lo = slope[0] * (total - _kernel_integral(u - u[0] + du / 2))
    tail_hi = slope[-1] * (total - _kernel_integral(u[-1] - u + du / 2))
    return np.interp(lf, u, (inner + tail_lo + tail_hi) / math.pi)


def phase_unit_evidence(freq_hz: np.ndarray, mag_db: np.ndarray, phase: np.ndarray,
                        decisive: float = DECISIVE) -> str:
    """'deg', 'rad' or 'unclear': which unit makes the phase follow the magnitude.

    Evidence weighed: the phase predicted from the magnitude by Bode's
    gain-phase relation (:func:`bode_phase`) against the column read as
    degrees and as radians (each unwrapped, each allowed a constant offset:
    an inverting part).  The score of a reading is the mean absolute
    deviation of its difference from the prediction; a reading wins when its
    score is ``decisive`` times smaller than the other's.  Otherwise, or with
    fewer than five usable points, the answer is 'unclear'.  A part that is
    not minimum phase (a delay, a right-half-plane zero) adds lag to the
    right reading and makes the answer 'unclear' sooner, never the wrong unit
    for a phase that stays small.
    """
    f, m, x = (np.asarray(v, dtype=float) for v in (freq_hz, mag_db, phase))
    ok = np.isfinite(f) & (f > 0) & np.isfinite(m) & np.isfinite(x)
    f, m, x = f[ok], m[ok], x[ok]
    order = np.argsort(f, kind="stable")
    f, m, x = f[order], m[order], x[order]
    keep = np.concatenate([[True], np.diff(f) > 0])
    f, m, x = f[keep], m[keep], x[keep]
    if f.size < 5 or f[-1] <= f[0] * 1.01:
        return "unclear"
    predicted = bode_phase(f, m)
    # what the magnitude cannot show: a constant (inversion) and a lag proportional to
    # frequency (a delay, or a pole far above the band); both are fitted away
    basis = np.column_stack([np.ones_like(f), f / f[-1]])
    scores = {}
    for unit, rad in (("deg", np.radians(x)), ("rad", x)):
        r = np.unwrap(rad) - predicted
        coef, *_ = np.linalg.lstsq(basis, r, rcond=None)
        scores[unit] = float(np.mean(np.abs(r - basis @ coef)))
    deg, rad = scores["deg"] + FLOOR_RAD, scores["rad"] + FLOOR_RAD
    if deg * decisive < rad:
        return "deg"
    if rad * decisive < deg:
        return "rad"
    return "unclear"


def decide_phase_unit(values: np.ndarray, col: Column, override: str, warnings: list[str], *,
                      freq_hz: np.ndarray | None = None, mag_db: np.ndarray | None = None) -> str:
    """The unit a phase column is read in: 'deg' or 'rad'; a warning where the reading is in doubt.

    Evidence, in order: the override (``phase=``), the unit the header names,
    and the numbers.  A degrees column whose every value lies within ±π is
    questioned unless the magnitude confirms degrees
    (:func:`phase_unit_evidence`): a measured part with a few degrees of
    phase follows its magnitude as degrees and is no reason to doubt its
    header; when the magnitude cannot tell (a flat part, a noise-free
    phase, a lag that looks like a delay) the doubt is real and said.  A radians column passing two turns is
    questioned (an unwrapped phase in radians seldom does; common practice,
    no source).  A column naming no unit and staying within ±π is read by
    the evidence, and as radians when the evidence is unclear, with a
    warning saying which; outside ±π it is degrees.
    """
    form = override if override != "auto" else col.form
    peak = float(np.max(np.abs(values))) if values.size else 0.0
    small = 0.2 < peak <= np.pi * 1.001
    evidence = "unclear"
    if override == "auto" and small and form in ("deg", "auto") and freq_hz is not None \
            and mag_db is not None:
        evidence = phase_unit_evidence(freq_hz, mag_db, values)
    if override == "auto" and values.size >= 3:
        if form == "deg" and small and evidence != "deg":
            why = ("follows the magnitude slope as radians" if evidence == "rad" else
                   "the magnitude cannot tell the unit")
            warnings.append(f"phase column {quote(col.name)} is labelled degrees but every value lies "
                            f"within ±π (largest {peak:.3g}) and {why}; if it is in radians, use "
                            "phase='rad' (--phase-rad)")
        elif form == "rad" and peak > 4 * np.pi:
            warnings.append(f"phase column {quote(col.name)} is labelled radians but holds values up "
                            f"to {peak:.4g}, more than two turns; if it is in degrees, use "
                            "phase='deg' (--phase-deg)")
    if form == "auto":
        if not small:
            return "deg"
        if evidence == "deg":
            warnings.append(f"phase column {quote(col.name)} states no unit and stays within ±π; read as "
                            "degrees, since it follows the magnitude slope as degrees (use --phase-rad "
                            "if it is radians)")
            return "deg"
        why = "it follows the magnitude slope as radians" if evidence == "rad" else \
            "the magnitude does not tell"
        warnings.append(f"phase column {quote(col.name)} states no unit and stays within ±π; read as "
                        f"radians ({why}; use --phase-deg if it is degrees)")
        return "rad"
    return form
