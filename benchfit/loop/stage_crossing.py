"""Where 1/β meets Aol: the crossing of an op-amp stage, read once for text, JSON and picture."""

from __future__ import annotations

import math

import numpy as np

from benchfit.loop.loopgain import LoopPlant
from benchfit.loop.margins import Margins
from benchfit.loop.stage_networks import StageNetwork


#: Half-width (decades) of the difference that reads the slopes at the crossing.
def crossing(lp: LoopPlant, net: StageNetwork, fc_hz: float) -> dict[str, float | str]:
    """Where 1/β_eff = Aol/T meets Aol: frequency, level, slopes and rate of closure.

    The rate of closure is slope(|1/β|) − slope(|Aol|) in dB/decade (= −slope |T|),
    from :func:`benchfit.loop.closure.rate_of_closure_db` (the one place the
    figure is computed, for converter and stage designs alike).  The reading
    beside it is a rule of thumb (20 dB/decade ≈ stable with ample margin,
    40 ≈ marginal; common practice, no source), never a margin.
    """
    from benchfit.loop.closure import rate_of_closure_db, slope_db_per_decade

    if not (math.isfinite(fc_hz) and fc_hz > 0):
        return {"freq_hz": math.nan, "aol_db": math.nan, "aol_slope_db_per_decade": math.nan,
                "inv_beta_slope_db_per_decade": math.nan, "rate_of_closure_db_per_decade": math.nan,
                "reading": "no crossing"}
    roc = float(rate_of_closure_db(lp, net, fc_hz))
    aol_db = float(20 * np.log10(abs(lp.response(np.array([fc_hz]))[0])))
    return {"freq_hz": float(fc_hz), "aol_db": aol_db,
            "aol_slope_db_per_decade": float(slope_db_per_decade(lp, fc_hz)),
            "inv_beta_slope_db_per_decade": float(-slope_db_per_decade(net, fc_hz)),
            "rate_of_closure_db_per_decade": roc, "reading": closure_reading(roc)}


def worst_pm(m: Margins) -> float:
    """The smallest phase margin over every gain crossing (the main one's when it is alone)."""
    v = m.min_phase_margin_deg
    return float(min(m.phase_margin_deg, v)) if math.isfinite(v) else float(m.phase_margin_deg)


def closure_reading(roc: float) -> str:
    """The rule-of-thumb reading of a rate of closure (common practice, no source)."""
    if not math.isfinite(roc):
        return "no crossing"
    if roc < 30.0:
        return "about 20 dB/decade: the classic stable crossing (rule of thumb)"
    return "about 40 dB/decade or more: marginal, expect ringing (rule of thumb)"
