"""Rate of closure: how steeply 1/beta and the plant gain meet at the crossover.

Read the compensator as a 1/beta curve, ``1/|C|``, drawn against the plant
gain ``|P·H|`` (plant times sensing); the loop crosses over where they meet
and the rate of closure is the difference of their slopes there::

    ROC = slope(20·log10(1/|C|)) − slope(20·log10|P·H|)      in dB/decade

20 dB/decade is the classic well-damped crossing, 40 dB/decade a marginal
one (common practice, no source).

This module is the one place the figure is computed from the actual
responses (not from asymptotes), so the design placement note, the report's
text, its JSON summary and the crossing picture all quote the same number.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import Any

import numpy as np

#: Half-width of the central difference, decades (±1/40 decade).
HALF_STEP_DECADES = 1.0 / 40.0


def _call(obj: Any) -> Callable[[np.ndarray], np.ndarray]:
    fn = getattr(obj, "response", obj)
    if not callable(fn):
        raise TypeError(f"expected a response (model, plant or callable of freq_hz), got {type(obj).__name__}")
    return fn


def slope_db_per_decade(response: Any, freq_hz: float) -> float:
    """d(20·log10|H|)/d(log10 f) at ``freq_hz``, dB/decade (central difference, ±1/40 decade).

    ``response`` is a model, a loop plant, a compensator model or any callable
    mapping an array of Hz to complex values.
    """
    f = float(freq_hz)
    if not (math.isfinite(f) and f > 0):
        return math.nan
    step = 10.0 ** HALF_STEP_DECADES
    fn = _call(response)
    up, dn = (abs(complex(np.asarray(fn(np.array([x])))[0])) for x in (f * step, f / step))
    if not (up > 0 and dn > 0):
        return math.nan
    return 20.0 * math.log10(up / dn) / (2.0 * HALF_STEP_DECADES)


def rate_of_closure_db(plant: Any, compensator: Any, freq_hz: float) -> float:
    """Rate of closure of ``1/|C|`` against ``|P·H|`` at ``freq_hz``, dB/decade.

    Parameters
    ----------
    plant
        Plant times sensing P·H (a loop plant, model or callable of Hz).
    compensator
        The compensator C with the parts in question (ideal or snapped), a
        model or callable of Hz.
    freq_hz
        Where to read it: the crossover of the loop made of those parts.

    Returns
    -------
    float
        ``slope(1/|C|) − slope(|P·H|)``; NaN when ``freq_hz`` is not a
        finite positive frequency.
    """
    return -slope_db_per_decade(compensator, freq_hz) - slope_db_per_decade(plant, freq_hz)
