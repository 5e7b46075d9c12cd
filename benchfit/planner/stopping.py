"""When an adaptive capture stops."""

from __future__ import annotations

import math

from benchfit.planner import placement as pl
from benchfit.planner.settings import MAX_POINTS, MAX_TIME, PRECISION, AdaptiveSettings

#: Purposes of the placement rules that must be satisfied before the capture may stop.
RULE_PURPOSES = ("crossing", "resonance", "residual", "again")


def gm_known(gm_db: float, gm_sigma_db: float, settings: AdaptiveSettings) -> bool:
    """True when the gain margin is known well enough to stop.

    Evidence weighed: the GM and its σ.  Known when its σ is within the asked
    one, or when even its lower 2σ bound lies beyond
    :data:`~benchfit.planner.placement.DECIDING_GM_DB` (a margin that large is
    known as "more than 30 dB", which is all a designer needs of it), or when
    the model has no phase crossing in the band and nothing hides one (σ 0).
    """
    if gm_sigma_db <= settings.gm_sigma_db:
        return True
    return math.isfinite(gm_sigma_db) and gm_db - 2.0 * gm_sigma_db > pl.DECIDING_GM_DB


def stop_reason(pm_sigma_deg: float, gm_db: float, gm_sigma_db: float, adequate: bool,
                settings: AdaptiveSettings, points: int, elapsed_s: float,
                pending: int = 0) -> str | None:
    """Why the capture should stop now, or None to go on.

    Evidence weighed, first match wins: both margins known (the PM to the asked
    σ, the GM as :func:`gm_known` says) from an adequate fit
    (:func:`fit_adequate`), with no point still asked for by the crossing,
    resonance, residual or buried-point rules (``pending``: a σ from a fit
    that has not yet seen both sides of a crossing or the width of a resonance
    speaks only for the model's shape) -> :data:`PRECISION`; the point
    budget spent -> :data:`MAX_POINTS`; the time budget spent -> :data:`MAX_TIME`.
    """
    if (adequate and pending == 0 and pm_sigma_deg <= settings.pm_sigma_deg
            and gm_known(gm_db, gm_sigma_db, settings)):
        return PRECISION
    if points >= settings.max_points:
        return MAX_POINTS
    if elapsed_s >= settings.max_time_s:
        return MAX_TIME
    return None
