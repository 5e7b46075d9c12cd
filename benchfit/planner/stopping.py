"""When an adaptive capture stops, and when it refuses to start."""

from __future__ import annotations

import numpy as np

from benchfit import numfmt
from benchfit.planner.gainmargin import (  # noqa: F401 - gm_known re-exported
    GM_GIVEN_UP,
    GM_KNOWN,
    GM_LARGE,
    gm_known,
)
from benchfit.planner.settings import (  # noqa: F401 - NEEDS_LOOP_GAIN re-exported
    LOOP_QUANTITIES,
    MAX_POINTS,
    MAX_TIME,
    NEEDS_LOOP_GAIN,
    PM_ONLY,
    PRECISION,
    AdaptiveSettings,
)

#: Purposes of the placement rules that must be satisfied before the capture may stop.
RULE_PURPOSES = ("crossing", "resonance", "residual", "again", "beyond")


def stop_reason(pm_sigma_deg: float, gm, adequate: bool, settings: AdaptiveSettings, points: int,
                elapsed_s: float, pending: int = 0) -> str | None:
    """Why the capture should stop now, or None to go on.

    ``gm`` is the gain margin's :class:`~benchfit.planner.gainmargin.GainMarginState`.
    Evidence weighed, first match wins: the phase margin known to the asked σ
    from an adequate fit (:func:`~benchfit.planner.fitstep.fit_adequate`), with
    no point still asked for by the crossing, resonance, residual, beyond-the-
    crossing or buried-point rules (``pending``: a σ from a fit that has not yet
    seen both sides of a crossing or the width of a resonance speaks only for
    the model's shape), and the gain margin known (:func:`gm_known`) ->
    :data:`PRECISION`; the same with a gain margin that cannot be known from
    this capture (beyond the band, or not determined once every rule that
    could pin it is spent) -> :data:`PM_ONLY`; the point budget spent ->
    :data:`MAX_POINTS`; the time budget spent -> :data:`MAX_TIME`.
    """
    if adequate and pending == 0 and pm_sigma_deg <= settings.pm_sigma_deg:
        if gm.status in (GM_KNOWN, GM_LARGE):
            return PRECISION
        if gm.status in GM_GIVEN_UP:
            return PM_ONLY
    if points >= settings.max_points:
        return MAX_POINTS
    if elapsed_s >= settings.max_time_s:
        return MAX_TIME
    return None


def not_a_loop_gain(freq_hz, response) -> str:
    """Why the coarse pass is not a loop gain the adaptive capture can work on ("" when it is).

    Evidence weighed: the coarse pass's usable points (those above the noise).
    Every rule of the capture (points where the margins are decided, the stop
    when they are known) starts from the gain crossing, |T| = 1; a measurement
    whose |T| stays above or below 1 over the whole band has none (a plant, an
    impedance, a loop gain measured in a band that misses its crossover), so
    no point could ever make a margin known and the capture would only spend
    its budget.  A crossing between two neighbouring usable points (their
    log-magnitudes of opposite sign) is enough.
    """
    f = np.asarray(freq_hz, float)
    mag = np.abs(np.asarray(response, complex))
    ok = np.isfinite(mag) & (mag > 0) & np.isfinite(f)
    f, mag = f[ok], mag[ok]
    if f.size < 2:
        return (f"{f.size} of the coarse pass's points stand above the noise: nothing to find a "
                "gain crossing in")
    db = 20.0 * np.log10(mag[np.argsort(f)])
    if np.any(np.sign(db[:-1]) * np.sign(db[1:]) <= 0):
        return ""
    return (f"no gain crossing (|T| = 1) in {numfmt.eng(f.min(), 'Hz')}..{numfmt.eng(f.max(), 'Hz')}: "
            f"|T| stays between {numfmt.db(db.min())} and {numfmt.db(db.max())}")
