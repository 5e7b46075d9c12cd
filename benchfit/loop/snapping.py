"""Snapping a network's parts to E-series values, with a search over each part's neighbours."""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np

from benchfit.loop import eseries
from benchfit.loop.loopgain import LoopPlant
from benchfit.loop.networks import Network
from benchfit.loop.opamp import OpAmp
from benchfit.loop.passrules import draws_pass, margins_meet
from benchfit.loop.targets import Targets

#: screened part sets checked with the dense analysis, at most (each costs one prediction)
VERIFY_AT_MOST = 8


def snap_network(net: Network, r_series: str, c_series: str) -> Network:
    """The network with resistors snapped to ``r_series`` and capacitors to ``c_series``."""
    parts = {n: float(eseries.snap(v, r_series if n[0] == "R" else c_series))
             for n, v in net.parts.items()}
    return Network(net.kind, parts)


def series_neighbours(value: float, name: str) -> tuple[float, float]:
    """The series values just below-or-at and just above-or-at ``value``."""
    mant = eseries.series_values(name)
    dec = math.floor(math.log10(value))
    cands = np.concatenate([mant * 10.0 ** (dec - 1), mant * 10.0 ** dec, mant * 10.0 ** (dec + 1)])
    cands = eseries.snap(cands, name)  # rounds away binary noise, same values
    lo = cands[cands <= value * (1 + 1e-12)].max()
    hi = cands[cands >= value * (1 - 1e-12)].min()
    return float(lo), float(hi)


def snap_search(net: Network, corners: Sequence[LoopPlant], opamp: OpAmp | None,
                targets: Targets, fc_hz: float, r_series: str, c_series: str,
                crossings: str | tuple[float, float] = "all") -> tuple[Network, str]:
    """Snap parts to their series, trying each part's lower and upper neighbour.

    Log-nearest snapping alone can lose a degree or two of phase margin.  All
    combinations of rounding each part down or up (at most 2⁶ = 64 sets) are
    screened at once on a sampled grid with the Monte Carlo's pass rule
    (:func:`benchfit.loop.passrules.draws_pass`, no slack); the sets that pass
    on every corner are then checked in order of preference (the log-nearest
    set first, then by the distance of the crossover from ``fc_hz`` on the
    first corner) with the dense analysis the design reports
    (:func:`benchfit.loop.passrules.margins_meet`), and the first that meets
    the targets is kept.  When none does, the log-nearest set is returned.

    Returns
    -------
    network, how
        ``how`` is "nearest" or "neighbour search".
    """
    from benchfit.loop.margins import margins_batch
    from benchfit.loop.prediction import predict
    from benchfit.loop.tolerance import integrators_of

    nearest = snap_network(net, r_series, c_series)
    names = list(net.parts)
    opts = [series_neighbours(v, r_series if n[0] == "R" else c_series)
            for n, v in net.parts.items()]
    combos = np.array(np.meshgrid(*[np.array(o) for o in opts], indexing="ij")).reshape(
        len(names), -1).T
    combos = np.unique(combos, axis=0)
    vals = {n: combos[:, i:i + 1] for i, n in enumerate(names)}
    ok = np.ones(len(combos), dtype=bool)
    dist = np.zeros(len(combos))
    for i, lp in enumerate(corners):
        f = lp.grid(fc_hz / 1e3, max(fc_hz * 1e3, 0.0 if opamp is None else opamp.gbw_hz * 10))
        t = lp.response(f)[None, :] * net.response(f, opamp, vals)
        out = margins_batch(f, t, unstable_open_loop_poles=lp.unstable_poles,
                            integrators=None if lp.is_data else integrators_of(lp, net, opamp))
        ok &= draws_pass(out["stable"], out["pm_deg"], out["gm_db"], out["gains_pm_deg"],
                         out["phases_gm_db"], targets, crossings)
        if i == 0:
            dist = np.abs(np.log(np.asarray(out["crossover_hz"], dtype=float) / fc_hz))
    nearest_row = np.array([nearest.parts[n] for n in names])
    is_nearest = np.all(np.isclose(combos, nearest_row, rtol=1e-9, atol=0.0), axis=1)
    order = np.lexsort((np.nan_to_num(dist, nan=np.inf), ~is_nearest))
    for j in [int(k) for k in order if ok[k]][:VERIFY_AT_MOST]:
        cand = nearest if is_nearest[j] else \
            Network(net.kind, {n: float(combos[j, i]) for i, n in enumerate(names)})
        pred = predict(corners, cand, opamp)
        if all(margins_meet(m, targets, crossings) for m in pred.corners):
            return cand, "nearest" if is_nearest[j] else "neighbour search"
    return nearest, "nearest"
