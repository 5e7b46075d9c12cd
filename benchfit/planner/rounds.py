"""One round of the adaptive capture: what decides the margins, where the next points go, and
where the gain margin stands.

:class:`RoundPlanner` is the half of :class:`~benchfit.planner.adaptive.AdaptiveCapture`
that turns a fit of the points so far into the next points: the named rules of
:mod:`benchfit.planner.placement` (crossings, beyond a phase crossing, resonances,
residuals, buried points again; then the variance rule or, without a σ, the densify
rule), each point's required σ (:mod:`benchfit.planner.noise`), and the gain margin's
state (:mod:`benchfit.planner.gainmargin`).  It reads the capture's state (settings,
level, noise and time maps, rows) and measures nothing.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from benchfit.planner import placement as pl
from benchfit.planner.gainmargin import GainMarginState, gain_margin_state, hidden_by_noise
from benchfit.planner.noise import (
    BURIED_RELATIVE_SIGMA,
    choose_point_settings,
    component_sigma,
    noise_dominated,
    point_sigma,
    required_point_sigma,
)
from benchfit.planner.stopping import RULE_PURPOSES
from benchfit.planner.uncertainty import MarginSpread

#: Points placed per round (the named rules first, the variance rule fills the rest,
#: at least two).
POINTS_PER_ROUND = 8
#: A frequency whose point stayed buried this many times is not asked for again.
MAX_BURIED_ATTEMPTS = 3


@dataclass(frozen=True)
class RoundPlan:
    """What one round decided: the points to measure (frequency, purpose), how many of them
    the named rules ask for, the gain margin's state and what decides the margins."""

    points: list[tuple[float, str]]
    pending: int
    gm: GainMarginState
    decisive: list[tuple[float, float]]


class RoundPlanner:
    """Placement for :class:`~benchfit.planner.adaptive.AdaptiveCapture` (module notes)."""

    # ----- what decides the margins ------------------------------------------------------
    def _resonances(self, fit) -> list[tuple[float, float]]:
        return pl.deciding_resonances(pl.model_resonances(fit.model), fit.model.response)

    def _magnitude(self, fit, f: float) -> float:
        return float(abs(fit.model.response(np.array([f]))[0]))

    def _hidden(self, fit) -> tuple[list[float], list[float]]:
        """Buried points at this level that may hide a phase crossing: (all, to measure again)."""
        buried = [(r.freq_hz, r.bandwidth_hz, r.repeats) for r in self.rows
                  if not r.in_sweep and r.purpose.endswith("-buried")
                  and math.isclose(r.level_v, self.level, rel_tol=1e-9)]
        return hidden_by_noise(buried, [r.freq_hz for r in self._sweep()],
                               lambda f: self._magnitude(fit, f),
                               min_bandwidth_hz=self.s.min_bandwidth_hz, max_repeats=self.s.max_repeats)

    def _decisive(self, spread: MarginSpread, fit) -> list[tuple[float, float]]:
        """(frequency, component σ) of everything that decides a margin (see required_point_sigma)."""
        pm, gm = self.s.pm_sigma_deg, self.s.gm_sigma_db
        out = [(f, component_sigma(kind, pm, gm)) for f, kind in
               pl.deciding_crossings(spread.margins.crossings)]
        out += [(f0, component_sigma("phase", pm, gm)) for f0, _ in self._resonances(fit)]
        out += [(f, component_sigma("phase", pm, gm)) for f in self._hidden(fit)[1]]
        return out

    def _sigma_for(self, f: float, decisive: list[tuple[float, float]]) -> float:
        """The absolute σ a point at ``f`` must reach: the relative rule times |T| of the model."""
        rel = required_point_sigma(f, decisive)
        if not math.isfinite(rel) or self.model is None:
            return math.inf
        return rel * float(abs(self.model.response(np.array([f]))[0]))

    def _plan(self, f: float, decisive):
        return choose_point_settings(f, self._sigma_for(f, decisive), self.level, self.noise,
                                     self.s.bandwidth_hz, self.s.min_bandwidth_hz, self.s.max_repeats)

    def _useful(self, f: float, decisive, fit) -> bool:
        """False when a point at ``f`` would be buried even with the settings planned for it, or
        stayed buried :data:`MAX_BURIED_ATTEMPTS` times already."""
        tries = sum(1 for r in self.rows if r.purpose.endswith("-buried")
                    and abs(math.log10(r.freq_hz / f)) < pl.MIN_SPACING_DECADES
                    and math.isclose(r.level_v, self.level, rel_tol=1e-9))
        if tries >= MAX_BURIED_ATTEMPTS:
            return False
        if self.noise is None:
            return True
        sigma = point_sigma(f, self._plan(f, decisive), self.level, self.noise)
        return not noise_dominated(sigma, self._magnitude(fit, f))

    # ----- the round ---------------------------------------------------------------------
    def _round_record(self, resp, result, resid, spread: MarginSpread, gm: GainMarginState,
                      adequate: bool) -> dict[str, Any]:
        """One entry of the history: what the round's fit knew."""
        return {"points": len(resp), "instrument_time_s": self.elapsed_s,
                "phase_margin_deg": spread.margins.phase_margin_deg,
                "phase_margin_sigma_deg": spread.pm_sigma_deg,
                "gain_margin_db": spread.margins.gain_margin_db, "gain_margin_sigma_db": gm.sigma_db,
                "gain_margin_status": gm.status, "fit_adequate": adequate,
                "reduced_chi2": result.stats.get("reduced_chi2"), "order": result.stats.get("order"),
                "missed_points": int(np.sum(resid > pl.RESIDUAL_SIGMAS)),
                "why_unknown": spread.reason or gm.reason}

    def plan_round(self, resp, result, spread: MarginSpread, resid: np.ndarray) -> RoundPlan:
        """The next points, the named rules' share of them and the gain margin's state."""
        decisive = self._decisive(spread, result)
        measured = resp.freq_hz
        sweep_f = [r.freq_hz for r in self._sweep()]
        crossings = pl.deciding_crossings(spread.margins.crossings)
        phase_x = [f for f, kind in crossings if kind == "phase"]
        asks: list[tuple[float, str]] = []
        asks += [(f, "crossing") for f in pl.crossing_points([f for f, _ in crossings], measured)]
        asks += [(f, "beyond") for f in pl.beyond_crossing_points(
            phase_x, sweep_f, self.s.stop_hz, lambda f: self._useful(f, decisive, result))]
        asks += [(f, "resonance") for f in pl.resonance_points(self._resonances(result),
                                                                measured, self.band)]
        asks += [(f, "residual") for f in pl.residual_points(measured, resid)]
        hiding, again = self._hidden(result)
        asks += [(f, "again") for f in again]
        asks = [(f, why) for f, why in asks if self._useful(f, decisive, result)]
        pending = len(pl.merge_new_points([f for f, _ in asks], measured, self.band))
        m = spread.margins
        gm = gain_margin_state(m.gain_margin_db, spread.gm_sigma_db, self.s, hiding=hiding,
                               pending=pending, phase_crossing_hz=m.phase_crossover_hz,
                               usable_top_hz=max(sweep_f, default=math.nan), why_unknown=spread.reason)
        asks += self._variance_asks(result, spread, decisive, measured, len(asks), gm)
        if not math.isfinite(spread.pm_sigma_deg) or not (gm.settled or math.isfinite(gm.sigma_db)):
            asks += [(f, "densify") for f in pl.densify_points([f for f, _ in decisive], measured)]
        asks = [(f, why) for f, why in asks if self._useful(f, decisive, result)]
        chosen = pl.merge_new_points([f for f, _ in asks], measured, self.band)
        why: dict[float, str] = {}
        for f, p in asks:
            why.setdefault(f, p)
        points = [(f, why.get(f, "variance")) for f in chosen]
        return RoundPlan(points, sum(1 for _, p in points if p in RULE_PURPOSES), gm, decisive)

    def _variance_asks(self, result, spread: MarginSpread, decisive, measured, n_asked: int,
                       gm: GainMarginState) -> list[tuple[float, str]]:
        """The variance rule's points (:func:`~benchfit.planner.placement.variance_points`); the
        gain margin is left out of its targets once it needs no more points."""
        if not spread.log_draws.size:
            return []
        grid = spread.grid_hz
        far = np.min(np.abs(np.log10(grid)[:, None] - np.log10(measured)[None, :]), axis=1)
        keep = far >= pl.MIN_SPACING_DECADES
        cand = grid[keep]
        plan = [self._plan(f, decisive) for f in cand]
        sig = np.array([point_sigma(f, ps, self.level, self.noise) for f, ps in zip(cand, plan, strict=True)])
        sig = sig / np.abs(result.response(cand))          # relative, as the log draws are
        # a point the noise would bury tells the fit nothing: not a candidate
        sig = np.where(sig > BURIED_RELATIVE_SIGMA, np.inf, sig)
        cost = np.array([float(self.times.point_time(f, ps.bandwidth_hz, ps.repeats))
                         for f, ps in zip(cand, plan, strict=True)])
        targets, sigmas = [spread.pm_draws], [self.s.pm_sigma_deg]
        if not gm.settled:
            targets.append(spread.gm_draws)
            sigmas.append(self.s.gm_sigma_db)
        n_var = max(2, POINTS_PER_ROUND - n_asked)
        return [(f, "variance") for f in pl.variance_points(
            cand, spread.log_draws[:, keep], targets, sigmas, lambda fs: sig, lambda fs: cost, n_var)]
