"""Whether this capture can know the gain margin, and what it reports when it cannot.

A loop measured by injection is noisiest where |T| is small, and the phase
crossing of a loop with good margins lies there (|T| = −GM).  The capture
first tries to pin it: points either side of the crossing
(:func:`~benchfit.planner.placement.crossing_points`), usable data beyond it
(:func:`~benchfit.planner.placement.beyond_crossing_points`), buried points
where a crossing could hide measured again with a deciding point's effort
(:func:`hidden_by_noise`).  When that is done and the gain margin is still
not known, :func:`gain_margin_state` says why, and the capture may stop on
the phase margin alone (:data:`~benchfit.planner.settings.PM_ONLY`), the gain
margin reported as null with its status and the reason.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np

from benchfit import numfmt
from benchfit.planner import placement as pl
from benchfit.planner.settings import AdaptiveSettings

#: The gain margin's σ is within the asked one.
GM_KNOWN = "known"
#: Even its lower 2σ bound is beyond DECIDING_GM_DB: known as "more than 30 dB".
GM_LARGE = "more than 30 dB"
#: No phase crossing in the usable data: the gain margin lies beyond the band.
GM_BEYOND = "beyond the band"
#: Every rule that could pin it is spent and it is still not known.
GM_UNDETERMINED = "not determined"
#: Not known yet; the rules still place points for it (or its σ is above the asked one).
GM_PENDING = "not known yet"
#: The statuses with which the capture may stop on the phase margin alone.
GM_GIVEN_UP = (GM_BEYOND, GM_UNDETERMINED)


def gm_known(gm_db: float, gm_sigma_db: float, settings: AdaptiveSettings) -> bool:
    """True when the gain margin is known well enough to stop.

    Evidence weighed: the GM and its σ.  Known when its σ is within the asked
    one, or when even its lower 2σ bound lies beyond
    :data:`~benchfit.planner.placement.DECIDING_GM_DB` (a margin that large is
    known as "more than 30 dB", which is all a designer needs of it).  A margin
    that is not a number (no phase crossing in the band) is not known: it lies
    beyond the band (:func:`gain_margin_state`).
    """
    if not math.isfinite(gm_db):
        return False
    if gm_sigma_db <= settings.gm_sigma_db:
        return True
    return math.isfinite(gm_sigma_db) and gm_db - 2.0 * gm_sigma_db > pl.DECIDING_GM_DB


@dataclass(frozen=True)
class GainMarginState:
    """Where the gain margin stands: a status (the words above), the σ the stop rule weighs,
    and why (for a status other than known)."""

    status: str
    sigma_db: float
    reason: str = ""

    @property
    def settled(self) -> bool:
        """True when no further point is wanted for the gain margin."""
        return self.status in (GM_KNOWN, GM_LARGE) + GM_GIVEN_UP

    @property
    def has_value(self) -> bool:
        """True when the margin has a value to report (the others report null)."""
        return self.status not in GM_GIVEN_UP


def hidden_by_noise(buried: Sequence[tuple[float, float, int]], usable_hz: Sequence[float],
                    magnitude: Callable[[float], float], *, min_bandwidth_hz: float,
                    max_repeats: int, frontier: int = 2) -> tuple[list[float], list[float]]:
    """Buried points that may hide a phase crossing: (all of them, the ones to measure again).

    ``buried`` holds (frequency, bandwidth, repeats) of every buried point at the
    capture's level.  Evidence weighed: the model's
    |T| at each (``magnitude``).  Where it lies between −:data:`~benchfit.planner.
    placement.DECIDING_GM_DB` and 0 dB a phase crossing there would set a gain
    margin a designer needs, so the point hides it until measured above the
    noise.  The lowest ``frontier`` of them not yet measured with the narrowest
    bandwidth and the most readings are measured again with a deciding point's
    effort, so effort goes where the usable data end rather than into a whole
    buried stretch at once; those already measured so count as given up.  A
    buried point with a usable one within :data:`~benchfit.planner.placement.
    MIN_SPACING_DECADES` hides nothing.
    """
    usable = np.log10(np.asarray(list(usable_hz), float)) if len(usable_hz) else np.zeros(0)
    hiding, gave_up = set(), set()
    for f, bw, repeats in buried:
        if usable.size and np.min(np.abs(usable - math.log10(f))) < pl.MIN_SPACING_DECADES:
            continue                       # measured above the noise there since
        mag = magnitude(f)
        if 0 < mag <= 1.0 and 20 * math.log10(mag) >= -pl.DECIDING_GM_DB:
            hiding.add(f)
        if repeats >= max_repeats and bw <= min_bandwidth_hz:
            gave_up.add(f)
    return sorted(hiding), sorted(hiding - gave_up)[:frontier]


def gain_margin_state(gm_db: float, gm_sigma_db: float, settings: AdaptiveSettings, *,
                      hiding: Sequence[float], pending: int, phase_crossing_hz: float,
                      usable_top_hz: float, why_unknown: str = "") -> GainMarginState:
    """The gain margin's status, from the spread of the draws and what the rules still ask.

    Evidence weighed, first match wins:

    1. buried points where a crossing could hide (``hiding``): not known yet
       while a rule still asks for a point (``pending``: measuring them again,
       usable data beyond a crossing); otherwise not determined (buried in the
       noise at the narrowest bandwidth with the most readings);
    2. no phase crossing in the usable data in any draw (σ 0 at a margin that
       is not a number): beyond the band, up to the highest usable point;
    3. known (σ within the asked one) or more than 30 dB (:func:`gm_known`);
    4. σ infinite (the draws lose the crossing): not known yet while a rule
       asks for a point, otherwise not determined (at the edge of the usable
       data, with nothing usable beyond it);
    5. a finite σ above the asked one: not known yet.
    """
    top = numfmt.eng(usable_top_hz, "Hz")
    if hiding:
        if pending:
            return GainMarginState(GM_PENDING, math.inf, "buried points may hide a phase crossing")
        span = (numfmt.eng(min(hiding), "Hz") if len(hiding) == 1 else
                f"{numfmt.eng(min(hiding), 'Hz')}..{numfmt.eng(max(hiding), 'Hz')}")
        return GainMarginState(GM_UNDETERMINED, math.inf,
                               f"at {span}, where the model's |T| lies within {pl.DECIDING_GM_DB:g} dB "
                               "below 0 dB, the points stay buried in the noise at the narrowest "
                               "bandwidth and the most readings: a phase crossing could hide there")
    if not math.isfinite(gm_db) and gm_sigma_db == 0:
        return GainMarginState(GM_BEYOND, math.nan,
                               f"no phase crossing (-180°) in the usable data, up to {top}")
    if gm_known(gm_db, gm_sigma_db, settings):
        status = GM_KNOWN if gm_sigma_db <= settings.gm_sigma_db else GM_LARGE
        return GainMarginState(status, gm_sigma_db)
    if math.isinf(gm_sigma_db):
        if pending:
            return GainMarginState(GM_PENDING, math.inf, why_unknown)
        near = (f" near {numfmt.eng(phase_crossing_hz, 'Hz')}"
                if math.isfinite(phase_crossing_hz) else "")
        return GainMarginState(GM_UNDETERMINED, math.inf,
                               f"the phase crossing{near} is not pinned by the data "
                               f"({why_unknown or 'its sigma is not known'}); the usable data end at "
                               f"{top} and no point above it can be measured above the noise")
    return GainMarginState(GM_PENDING, gm_sigma_db, why_unknown)
