"""Per-draw margins for the spread histograms.

A design keeps only the percentiles and the yield of its Monte Carlo
(:class:`benchfit.loop.tolerance.Spread`).  A histogram needs the draws
themselves, so they are drawn again with
:func:`benchfit.loop.tolerance.draw_margins`, the function behind the
design's own Monte Carlo, with the design's seed, count and tolerances.
With the plant's fit attached (its parameter covariance) the draws are the
very ones the design's percentiles and yield were computed from.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np

from benchfit.errors import InputError
from benchfit.fileio import as_float
from benchfit.loop.design import Design
from benchfit.loop.tolerance import draw_margins
from benchfit.provenance import Provenance


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
    plant_uncertainty
        True when plant responses were drawn from a fit's covariance.
    provenance
        The design the draws repeat.
    """

    pm_deg: np.ndarray
    gm_db: np.ndarray
    crossover_hz: np.ndarray
    passed: np.ndarray
    seed: int | None
    plant_uncertainty: bool
    provenance: Provenance = field(default_factory=lambda: Provenance(step="spread_draws"))

    @property
    def yield_fraction(self) -> float:
        return float(np.mean(self.passed)) if self.passed.size else float("nan")

    def to_dict(self) -> dict[str, Any]:
        return {"kind": "spread_draws", "pm_deg": self.pm_deg.tolist(), "gm_db": self.gm_db.tolist(),
                "crossover_hz": self.crossover_hz.tolist(), "passed": self.passed.tolist(),
                "seed": self.seed, "plant_uncertainty": self.plant_uncertainty,
                "provenance": self.provenance.to_dict()}

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> SpreadDraws:
        try:
            return cls(pm_deg=np.array([as_float(v) for v in d["pm_deg"]]),
                       gm_db=np.array([as_float(v) for v in d["gm_db"]]),
                       crossover_hz=np.array([as_float(v) for v in d["crossover_hz"]]),
                       passed=np.array(d["passed"], dtype=bool), seed=d.get("seed"),
                       plant_uncertainty=bool(d.get("plant_uncertainty", False)),
                       provenance=Provenance.from_dict(d.get("provenance")))
        except (KeyError, TypeError) as e:
            raise InputError(f"spread draws incomplete ({e})") from None


def spread_draws(design: Design, plant_draws=None) -> SpreadDraws | None:
    """Draw the design's Monte Carlo again, keeping every draw.

    Parameters
    ----------
    design
        A design with a spread (None is returned when it has none).
    plant_draws
        ``draw_responses`` of the plant's fit, to include the plant uncertainty
        as the design did (a design read back from JSON no longer holds it).

    Returns
    -------
    SpreadDraws or None
    """
    sp = design.spread
    if sp is None:
        return None
    corners = list(design.corners)
    if plant_draws is not None and sp.plant_uncertainty:
        corners[0] = replace(corners[0], draws=plant_draws)
    out = draw_margins(corners, design.snapped.network, design.opamp, design.targets, r_tol=sp.r_tol,
                       c_tol=sp.c_tol, draws=sp.draws, seed=sp.seed, plant_uncertainty=sp.plant_uncertainty,
                       crossings=sp.crossings)
    return SpreadDraws(pm_deg=np.asarray(out["pm_deg"], float), gm_db=np.asarray(out["gm_db"], float),
                       crossover_hz=np.asarray(out["crossover_hz"], float),
                       passed=np.asarray(out["passed"], bool), seed=sp.seed,
                       plant_uncertainty=bool(out["plant_uncertainty"]),
                       provenance=design.provenance.derive("spread_draws", {
                           "draws": sp.draws, "seed": sp.seed, "r_tol": sp.r_tol, "c_tol": sp.c_tol}))
