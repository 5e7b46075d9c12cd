"""Phase arithmetic, crossing geometry and the Nyquist count shared by the margins code.

Used by :mod:`benchfit.loop.margins` (one loop, polished crossings) and
:mod:`benchfit.loop.marginsbatch` (many sampled loops at once), so both
follow the same rules.
"""

from __future__ import annotations

import numpy as np


def wrap180(deg):
    """Wrap degrees to (-180, 180]."""
    return 180.0 - np.mod(180.0 - np.asarray(deg, dtype=float), 360.0)


def to_db(T):
    with np.errstate(divide="ignore"):
        return 20.0 * np.log10(np.abs(T))


def nyquist_count(T: np.ndarray, integrators, unstable, cand=None, low_phase=None):
    """Nyquist count for sampled loops (rows of ``T``), with the asymptotic ends.

    The change of ∠(1+T) over the band is its principal change plus 360° for
    every crossing of the branch cut (1+T on the negative real axis), found
    from the sign changes of Im T (``cand``, computed when None).  The ends
    are snapped to their asymptotes: ω→0+ gives ∠K0 − n·90° (n integrators),
    ω→∞ gives ∠(1 + T(∞)), a multiple of 180°.  The full Nyquist contour is
    twice the positive-frequency half plus the small indentation around s = 0
    (−n·180°), and Z = P − N.

    ``low_phase`` (degrees, one per row), when given, is ∠(1+T) at ω → 0+ on
    the branch of the first point's principal angle, carried there along a
    fitted low-end model (:func:`benchfit.loop.asymptote.low_end_phase`); it
    is snapped to the asymptote instead of the first point's own angle, so an
    excess phase at the bottom of the band (a delay) is not rounded away.

    Returns
    -------
    N, Z, low-end deviation (deg), high-end deviation (deg)
        Counter-clockwise encirclements of −1, closed-loop RHP poles, and how
        far the band's ends are from the asymptotes (large = verdict unsure).
    """
    T = np.atleast_2d(T)
    if cand is None:
        im = T.imag
        cand = np.nonzero((im[:, :-1] > 0) != (im[:, 1:] > 0))
    r, _, _, step, _ = branch_crossings(T, cand, offset=1.0)
    jumps = np.zeros(T.shape[0])
    np.add.at(jumps, r, np.where(step > 0, 360.0, -360.0))
    n = np.asarray(integrators)
    th0 = np.degrees(np.angle(1.0 + T[:, 0]))
    if low_phase is not None:
        th0 = np.broadcast_to(np.asarray(low_phase, dtype=float), th0.shape)
    thinf = np.degrees(np.angle(1.0 + T[:, -1])) + jumps
    s0 = -n * 90.0 + 180.0 * np.rint((th0 + n * 90.0) / 180.0)
    sinf = 180.0 * np.rint(thinf / 180.0)
    N = np.rint((2.0 * (sinf - s0) - 180.0 * n) / 360.0).astype(int)
    Z = np.asarray(unstable) - N
    return N, Z, np.abs(th0 - s0), np.abs(thinf - sinf)


#: a stretch of |T| > 1 at least this wide (decades) counts as the loop's own, not a resonance
BROAD_DECADES = 0.5


def main_score(length, from_bottom, column):
    """Score of a falling crossing for the main-crossover choice (higher wins).

    Broad stretches score above any narrow one, and among them the higher
    frequency (column) wins; narrow ones score their length.
    """
    broad = from_bottom | (length >= BROAD_DECADES)
    return np.where(broad, 1e6 + column, length)



def wrap_rad(a):
    return np.pi - np.mod(np.pi - a, 2 * np.pi)


#: Rounding allowance (rad) for an interval that ends exactly on ±π (see branch_crossings).
_ON_PI = 1e-9


def branch_crossings(T: np.ndarray, cand: tuple[np.ndarray, np.ndarray], offset: float = 0.0):
    """Intervals where ∠(T + offset) (stepping by the wrapped difference) passes ±180°.

    ``cand`` are the (rows, columns) of the intervals where Im T changes sign.
    Returns rows, columns, start angle (rad), step (rad), and the fraction
    of the interval at which the crossing lies.
    """
    r, c = cand
    t0 = T[r, c] + offset
    # Im exactly 0 counts on the Im <= 0 side (the sign test above); np.angle gives +π for
    # a negative real with +0 imaginary part, the other side's value
    a = np.where((t0.imag == 0) & (t0.real < 0), -np.pi, np.angle(t0))
    step = wrap_rad(np.angle(T[r, c + 1] + offset) - a)
    end = a + step
    # A point sitting on the crossing (Im T ~ 1e-17: a grid point placed at the nominal
    # phase crossover) ends its interval at ±π up to rounding, a hair inside: the sign
    # change of Im T already says a crossing of 0 or ±π lies here, and |end| near π says
    # which, so the test allows rounding (an interval that passes 0 ends near 0).
    keep = (end > np.pi - _ON_PI) | (end <= -np.pi + _ON_PI)
    r, c, a, step = r[keep], c[keep], a[keep], step[keep]
    target = np.where(step > 0, np.pi, -np.pi)
    return r, c, a, step, np.clip((target - a) / step, 0.0, 1.0)
