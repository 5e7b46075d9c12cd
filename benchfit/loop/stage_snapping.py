"""Snapping an op-amp stage's network to E-series parts without losing the targets.

See :func:`snap_stage` for the candidates tried and :func:`pick_snapped` for the
rule that keeps one.
"""

from __future__ import annotations

import math

import numpy as np

from benchfit.loop import eseries
from benchfit.loop.loopgain import LoopPlant
from benchfit.loop.prediction import predict
from benchfit.loop.stage_crossing import worst_pm
from benchfit.loop.stage_networks import StageNetwork
from benchfit.loop.stage_synthesis import (
    GAIN_TOL,
    StageSynthesis,
    _margins,
    snapped_gain_pairs,
    stage_grid,
)
from benchfit.loop.targets import Targets

#: Gain pairs (impedance levels) tried when snapping.
PAIRS = 8
#: Ratio error (log) a gain pair may have and still be tried (half the 1 % allowed).
PAIR_TOL = 0.005
#: Snapped sets whose exact margins are checked before the best on the grid is kept.
EXACT_CHECKS = 4
#: Series neighbours tried on each side of a part's value when snapping.
NEIGHBOURS = 2
#: The resistor each network is trimmed with when snapping (its series values within
#: TRIM_SPAN steps either side are all tried), so the coarse capacitor series does not
#: leave the phase margin far from the target.
TRIM = {"lag": "Rn", "lag-lead": "Rn", "isolation": "Riso", "snubber": "Rs"}
TRIM_SPAN = 8
#: Parts whose values scale with the feedback resistors' impedance level.
FEEDBACK_SIDE = ("Cf", "Rn", "Cn")


def pick_snapped(pm: np.ndarray, gm: np.ndarray, stable: np.ndarray, gain_err: np.ndarray,
                 targets: Targets) -> int:
    """Index of the snapped part set to keep.

    Evidence weighed: the DC closed-loop gain error must be within 1 %; then a
    set that is stable, meets the gain margin and has PM >= target is
    preferred, the one with PM nearest the target; failing that, the stable
    set with PM nearest the target; failing that, the smallest gain error.
    """
    ok_gain = np.abs(gain_err) <= GAIN_TOL
    dist = np.abs(pm - targets.phase_margin_deg)
    for mask in (ok_gain & stable & (gm >= targets.gain_margin_db) & (pm >= targets.phase_margin_deg),
                 ok_gain & stable):
        if mask.any():
            return int(np.argmin(np.where(mask, dist, np.inf)))
    return int(np.argmin(np.abs(gain_err)))


def neighbours(value: float, series: str, n: int = NEIGHBOURS) -> np.ndarray:
    """The ``n`` series values at or below ``value`` and the ``n`` at or above it."""
    mant = eseries.series_values(series)
    dec = math.floor(math.log10(value))
    c = eseries.snap(np.concatenate([mant * 10.0 ** d for d in (dec - 1, dec, dec + 1)]), series)
    lo = c[c <= value * (1 + 1e-12)][-n:]
    hi = c[c >= value * (1 - 1e-12)][:n]
    return np.unique(np.concatenate([lo, hi]))


def snap_stage(syn: StageSynthesis, lp: LoopPlant, targets: Targets, gain: float,
               r_series: str, c_series: str) -> StageNetwork:
    """The snapped network (see :func:`pick_snapped`).

    Gain pairs: every pair of series values with Rg within 3× of its ideal whose
    ratio is within 0.5 % (or the best one's error) of the ideal; for each, the
    feedback-side parts (Cf, Rn, Cn) are moved to the pair's impedance level
    (time constants kept) and each part is tried at its two lower and two upper
    series neighbours, the network's trim resistor (:data:`TRIM`) at eight.  Several impedance levels give the capacitors' coarse
    series a fine effective step.
    """
    net = syn.network
    gain_ideal = {k: net.parts[k] for k in ("Rf", "Rg") if k in net.parts}
    pairs = snapped_gain_pairs(gain_ideal, r_series, count=PAIRS)
    if "Rg" in gain_ideal:
        ratio = gain_ideal["Rf"] / gain_ideal["Rg"]
        errs = [abs(math.log(p["Rf"] / p["Rg"] / ratio)) for p in pairs]
        pairs = [p for p, e in zip(pairs, errs, strict=True) if e <= max(errs[0], PAIR_TOL)]
    others = [n for n in net.parts if n not in ("Rf", "Rg")]
    rows: list[dict[str, float]] = []
    for pair in pairs:
        k = pair["Rf"] / net.parts["Rf"]
        level = {n: (net.parts[n] * k if n[0] == "R" else net.parts[n] / k)
                 if n in FEEDBACK_SIDE else net.parts[n] for n in others}
        opts = [neighbours(level[n], r_series if n[0] == "R" else c_series,
                           n=TRIM_SPAN if n == TRIM.get(net.kind) else NEIGHBOURS) for n in others]
        combos = np.array(np.meshgrid(*[np.array(o) for o in opts], indexing="ij")).reshape(
            len(others), -1).T if others else np.zeros((1, 0))
        rows += [pair | {n: float(c[i]) for i, n in enumerate(others)} for c in np.unique(combos, axis=0)]
    vals = {n: np.array([[r[n]] for r in rows]) for n in rows[0]}
    f = stage_grid(lp)
    got = [_margins(lp, f, net, {n: v[a:a + 500] for n, v in vals.items()})
           for a in range(0, len(rows), 500)]  # chunks bound the memory
    pm, gm, st = (np.concatenate([g[i] for g in got]) for i in range(3))
    r = vals["Rf"][:, 0] / vals["Rg"][:, 0] if "Rg" in vals else np.zeros(len(rows))
    ideal = 1.0 + r if net.stage == "noninverting" else r
    err = ideal / abs(gain) - 1.0
    # the sweep judged margins on the grid; the exact margins of the few best sets decide
    first = None
    for _ in range(EXACT_CHECKS):
        best = pick_snapped(pm, gm, st, err, targets)
        cand = net.with_parts(rows[best])
        first = first or cand
        m = predict([lp], cand, None).corners[0]
        if m.closed_loop_stable and targets.met(worst_pm(m), m.gain_margin_db):
            return cand
        st = st.copy()
        st[best] = False  # set aside; the next best is checked
    return first
