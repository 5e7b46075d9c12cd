"""Per-draw margins for the spread histograms.

A design keeps only the percentiles and the yield of its Monte Carlo
(:class:`benchfit.loop.tolerance.Spread`).  A histogram needs the draws
themselves, so this module repeats the same Monte Carlo one draw at a time
through :func:`benchfit.loop.tolerance.monte_carlo`: with one draw, each
percentile is that draw's value and the yield is 1 or 0 (it met every target
or not), so the histogram uses exactly the tolerance model and the pass rule
of the design, on fresh random draws.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from benchfit.loop.design import Design
from benchfit.loop.tolerance import monte_carlo


@dataclass(frozen=True, eq=False)
class SpreadDraws:
    """Margins of each Monte Carlo draw (worst corner of each draw).

    Attributes
    ----------
    pm_deg, gm_db, crossover_hz
        One value per draw (degrees, dB, Hz); gm_db is inf with no phase crossing.
    passed
        True where the draw met every target with a stable loop.
    seed
        Seed of the draws.
    """

    pm_deg: np.ndarray
    gm_db: np.ndarray
    crossover_hz: np.ndarray
    passed: np.ndarray
    seed: int

    @property
    def yield_fraction(self) -> float:
        return float(np.mean(self.passed)) if self.passed.size else float("nan")

    def to_dict(self) -> dict:
        return {"kind": "spread_draws", "pm_deg": self.pm_deg.tolist(), "gm_db": self.gm_db.tolist(),
                "crossover_hz": self.crossover_hz.tolist(), "passed": self.passed.tolist(),
                "seed": self.seed}


def spread_draws(design: Design, n: int | None = None, seed: int = 0, plant_draws=None) -> SpreadDraws | None:
    """Repeat the design's Monte Carlo draw by draw.

    Parameters
    ----------
    design
        A design with a spread (None is returned when it has none).
    n
        Number of draws (default: the design's own count, at most 1000).
    seed
        Seed of the sequence the per-draw seeds are spawned from.
    plant_draws
        ``draw_responses`` of the plant's fit, to include plant uncertainty as
        the design did (a design read from JSON no longer holds it).

    Returns
    -------
    SpreadDraws or None
    """
    sp = design.spread
    if sp is None:
        return None
    n = int(n if n is not None else min(sp.draws, 1000))
    corners = list(design.corners)
    if plant_draws is not None and sp.plant_uncertainty:
        corners[0] = replace(corners[0], draws=plant_draws)
    seeds = np.random.SeedSequence(seed).generate_state(n)
    pm, gm, fc, ok = (np.empty(n) for _ in range(4))
    for i, s in enumerate(seeds):
        one = monte_carlo(corners, design.snapped.network, design.opamp, design.targets,
                          r_tol=sp.r_tol, c_tol=sp.c_tol, draws=1, seed=int(s),
                          plant_uncertainty=sp.plant_uncertainty)
        pc = one.percentiles
        pm[i], gm[i], fc[i] = pc["pm_deg"]["p50"], pc["gm_db"]["p50"], pc["crossover_hz"]["p50"]
        ok[i] = one.yield_fraction
    return SpreadDraws(pm_deg=pm, gm_db=gm, crossover_hz=fc, passed=ok.astype(bool), seed=seed)
