"""Judging the networks synthesis places: the design's own pass rule, on the plant's own grid.

Synthesis places networks in closed form and must then tell which of them
meet the targets.  It judges them with the rules that decide the design's
``targets_met``, its warnings, the snapping and the Monte Carlo yield
(:mod:`benchfit.loop.passrules`: every counted crossing, no slack), so it
never returns as meeting the targets a network the design then reports as
missing them:

* **screening** (:func:`screen`): each candidate on each plant corner, on
  the grid the Monte Carlo uses (:func:`benchfit.loop.featuregrid.feature_grid`:
  the plant's and the network's poles and zeros, clusters around lightly
  damped pairs, and the crossover being placed, exactly), judged by
  :func:`benchfit.loop.passrules.draws_pass`;
* **verification** (:func:`verify`): the candidate synthesis settles on,
  with the dense analysis the design's tables show
  (:meth:`benchfit.loop.loopgain.Loop.margins`) and
  :func:`benchfit.loop.passrules.margins_meet`.  Only a verified candidate
  counts as meeting the targets; a miss is reported with the dense numbers
  (:func:`miss_text`).

On both, the main crossover of the first corner must be the one placed
(:func:`crossover_is_placed`): when another crossing has taken over, the
network is not the one asked for.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from benchfit import numfmt
from benchfit.loop.featuregrid import feature_grid
from benchfit.loop.loopgain import Loop, LoopPlant
from benchfit.loop.networks import Network
from benchfit.loop.opamp import OpAmp
from benchfit.loop.passrules import draws_pass, shortfalls, worst_of

#: How far (relative) a main crossover found on a grid point may sit from the crossover
#: placed there and still be that crossing.  Not a margin tolerance: the placement sets
#: |T(fc)| = 1 to within 1e-9 (the finite op-amp's gain correction), which moves the
#: crossing by under 1e-6 relative at any loop slope above 0.01 dB/decade.
PLACED_RTOL = 1e-6


def crossover_is_placed(found_hz, fc_hz: float, grid_hz) -> np.ndarray:
    """Whether the main crossover found is the crossing placed at ``fc_hz``.

    The evidence is where the analysis put the main crossover.  Linear
    interpolation between grid points can put a crossing that is exactly at
    ``fc_hz`` anywhere in the grid interval that holds ``fc_hz`` (a measured
    plant's sweep points bracket it), and nowhere else; on a grid that holds
    ``fc_hz`` itself (a model's feature grid) the interval is that point.
    The interval is widened by :data:`PLACED_RTOL` on each side for the
    rounding of the placement.  A main crossover outside it (NaN included)
    means another gain crossing has become the main one.

    Parameters
    ----------
    found_hz
        Main crossover(s) found, Hz (scalar or array).
    fc_hz
        Crossover placed, Hz.
    grid_hz
        Increasing frequencies the crossing was interpolated on, Hz.

    Returns
    -------
    ndarray of bool, the shape of ``found_hz``
    """
    g = np.asarray(grid_hz, dtype=float)
    j = int(np.searchsorted(g, fc_hz))
    on_point = j < g.size and abs(g[j] / fc_hz - 1.0) <= PLACED_RTOL
    lo = fc_hz if on_point or j == 0 else float(g[j - 1])
    hi = fc_hz if on_point or j == g.size else float(g[j])
    f = np.asarray(found_hz, dtype=float)
    return (f >= lo * (1 - PLACED_RTOL)) & (f <= hi * (1 + PLACED_RTOL))


@dataclass(frozen=True)
class Screen:
    """Screening figures of candidate networks (one entry per candidate).

    Attributes
    ----------
    passed
        Stable on every corner, every counted crossing meets its target
        (:func:`benchfit.loop.passrules.draws_pass`), main crossover placed.
    pm_deg, gm_db
        Worst-corner main-crossover phase margin (−inf when unstable or not
        placed) and smallest gain margin, as the screening grid reads them.
    """

    passed: np.ndarray
    pm_deg: np.ndarray
    gm_db: np.ndarray


def screen(corners: Sequence[LoopPlant], nets: Sequence[Network], opamp: OpAmp | None,
           fc_hz: float, targets: Any, crossings: str | tuple[float, float] = "all") -> Screen:
    """Judge candidate networks on every corner's feature grid with the yield's pass rule.

    Each candidate is evaluated on its own grid,
    ``feature_grid(corner, network, opamp, [fc_hz])`` (the crossover being
    placed is the one crossing known before the analysis), with the
    integrators of the loop model, and passes when
    :func:`benchfit.loop.passrules.draws_pass` passes it on every corner and
    the first corner's main crossover is the placed one
    (:func:`crossover_is_placed`).

    Returns
    -------
    Screen
    """
    from benchfit.loop.margins import margins_batch
    from benchfit.loop.tolerance import integrators_of

    n = len(nets)
    passed = np.ones(n, dtype=bool)
    pm_w = np.full(n, np.inf)
    gm_w = np.full(n, np.inf)
    for i, net in enumerate(nets):
        for c, lp in enumerate(corners):
            f = feature_grid(lp, net, opamp, [fc_hz])
            t = lp.response(f) * net.response(f, opamp)
            out = margins_batch(f, t, unstable_open_loop_poles=lp.unstable_poles,
                                integrators=None if lp.is_data else integrators_of(lp, net, opamp))
            ok = bool(draws_pass(out["stable"], out["pm_deg"], out["gm_db"], out["gains_pm_deg"],
                                 out["phases_gm_db"], targets, crossings)[0])
            pm = float(out["pm_deg"][0]) if bool(out["stable"][0]) else -math.inf
            if c == 0 and not crossover_is_placed(out["crossover_hz"][0], fc_hz, f):
                ok, pm = False, -math.inf
            passed[i] &= ok
            pm_w[i] = min(pm_w[i], -math.inf if math.isnan(pm) else pm)
            gm = float(out["gm_db"][0])
            gm_w[i] = min(gm_w[i], -math.inf if math.isnan(gm) else gm)
    return Screen(passed=passed, pm_deg=pm_w, gm_db=gm_w)


@dataclass(frozen=True, eq=False)
class Verification:
    """The dense analysis of one network on every corner, judged by the pass rule.

    Attributes
    ----------
    passed
        Every corner meets the targets (:func:`benchfit.loop.passrules.margins_meet`)
        and the first corner's main crossover is the placed one.
    placed
        The first corner's main crossover is the placed one.
    margins
        :class:`~benchfit.loop.marginsresult.Margins` per corner.
    shortfalls
        :func:`benchfit.loop.passrules.shortfalls` per corner.
    names
        The corners' names.
    """

    passed: bool
    placed: bool
    margins: tuple[Any, ...]
    shortfalls: tuple[tuple[dict[str, Any], ...], ...]
    names: tuple[str, ...]


def verify(corners: Sequence[LoopPlant], net: Network, opamp: OpAmp | None, fc_hz: float,
           targets: Any, crossings: str | tuple[float, float] = "all") -> Verification:
    """Judge one network with the dense analysis the design reports and its pass rule.

    The margins are :meth:`Loop.margins` on each corner (a model's dense,
    refined evaluation; a measured plant's own points), the rule is
    :func:`benchfit.loop.passrules.shortfalls` (no slack), and the first
    corner's main crossover must be the placed one (:func:`crossover_is_placed`
    on the corner's feature grid, which holds ``fc_hz`` for a model and is the
    sweep for a measured plant).
    """
    ms = tuple(Loop(lp, net, opamp).margins() for lp in corners)
    short = tuple(tuple(shortfalls(m, targets, crossings)) for m in ms)
    placed = bool(crossover_is_placed(ms[0].crossover_hz, fc_hz,
                                      feature_grid(corners[0], net, opamp, [fc_hz])))
    return Verification(passed=placed and not any(short), placed=placed, margins=ms,
                        shortfalls=short, names=tuple(lp.name for lp in corners))


def miss_text(v: Verification) -> str:
    """What the dense analysis finds short, in words (the numbers the design's tables show).

    Per corner that misses: an unstable (or undecided) closed loop, else the
    phase margin and gain margin furthest below their targets
    (:func:`benchfit.loop.passrules.worst_of`) with where they are; and a
    main crossover that is not the placed one.
    """
    from benchfit.loop.prediction import shown

    parts = []
    many = len(v.names) > 1
    for name, m, short in zip(v.names, v.margins, v.shortfalls, strict=True):
        on = f" on {name}" if many else ""
        if short and short[0]["kind"] == "stability":
            parts.append(f"the closed loop is {short[0]['verdict']}{on}")
            continue
        g = worst_of(short, "gain")
        if g is not None:
            val = "no crossover in the band" if math.isnan(g["value"]) else \
                f"phase margin {shown(g['value'], g['target'])}°"
            at = "" if g["freq_hz"] == m.crossover_hz or math.isnan(g["freq_hz"]) else \
                f" at the {numfmt.eng(g['freq_hz'], 'Hz')} crossing"
            parts.append(f"{val}{at}{on}")
        p = worst_of(short, "phase")
        if p is not None:
            what = "gain margin" if not p["value"] < 0 else "gain reduction margin"
            val = "not known" if math.isnan(p["value"]) else \
                f"{shown(abs(p['value']), p['target'])} dB"
            parts.append(f"{what} {val} at {numfmt.eng(p['freq_hz'], 'Hz')}{on}")
    if not v.placed:
        parts.append(f"the main crossover is at {numfmt.eng(v.margins[0].crossover_hz, 'Hz')}, not the "
                     "one placed (another crossing took over)")
    return "; ".join(parts) + " (dense analysis)"


def closest_candidate(pm_deg: Sequence[float]) -> int:
    """Which of several candidates that all miss is kept to show: the highest worst-corner
    main-crossover phase margin.

    The evidence is the screening's worst-corner phase margin (−inf for an
    unstable loop or a crossover that moved), so a stable, placed network is
    preferred to one that is not; the first wins a tie (the least extra
    design phase margin).
    """
    pm = np.nan_to_num(np.asarray(pm_deg, dtype=float), nan=-np.inf)
    return int(np.argmax(pm))
