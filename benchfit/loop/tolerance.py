"""Monte Carlo spread of the loop margins over part tolerances and plant uncertainty.

Each draw scales every part of the network (and the divider resistors) by a
factor drawn uniformly within its tolerance band, ``1 ± tol`` (a uniform
spread over the band is the usual pessimistic reading of a tolerance: common
practice, no source), and, when the plant came from a fit, draws the plant's
response from the fit's parameter covariance (``FitResult.draw_responses``).
Every draw is evaluated on every plant corner at once (numpy broadcasting)
on a grid that holds the plant's own features and the nominal crossings
(:mod:`benchfit.loop.featuregrid`), so a draw equal to the nominal loop has
the nominal margins exactly.  A draw passes when, on every corner, its
closed loop is stable and every counted crossing meets its target, with no
slack (:func:`benchfit.loop.passrules.draws_pass`); the yield is the
fraction of draws that pass.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from benchfit import numfmt
from benchfit.errors import InputError
from benchfit.loop.densegrid import LIVE_DB
from benchfit.loop.featuregrid import feature_grid
from benchfit.loop.loopgain import Loop, LoopPlant
from benchfit.loop.networks import Network
from benchfit.loop.opamp import OpAmp
from benchfit.loop.passrules import check_crossings, describe, draws_pass
from benchfit.loop.targets import Targets

#: Percentiles reported.
PERCENTILES = (1, 5, 50, 95, 99)
_CHUNK = 2500  # draws evaluated together (bounds memory: chunk × grid complex values)


@dataclass(frozen=True)
class Spread:
    """Percentiles of the margins over the draws, and the yield.

    Attributes
    ----------
    draws
        Number of draws.
    seed
        Seed of the random generator (None when none was given).
    r_tol, c_tol
        Resistor and capacitor tolerance, fractions.
    plant_uncertainty
        True when plant responses were drawn from a fit's covariance.
    percentiles
        ``{"pm_deg": {"p1": ..., "p50": ...}, "gm_db": ..., "crossover_hz": ...}``
        of the worst corner of each draw.
    yield_fraction
        Fraction of draws meeting every target on every corner, stable.
    unstable_fraction
        Fraction of draws with an unstable closed loop on some corner.
    undecided_fraction
        Fraction of draws whose stability verdict is undecided on some corner
        (measured plants whose low end does not settle the integrator count);
        they do not pass.
    crossings
        Which crossings counted for the yield ("all", "main" or a band in Hz).
        ``percentiles`` also holds ``pm_worst_deg`` and ``gm_worst_db``
        (:func:`worst_crossings`: every counted crossing, the GM nearest 0 dB signed).
    nominal_stable
        The verdict of the nominal parts on the same grid (None: undecided or not known).
    """

    draws: int
    seed: int | None
    r_tol: float
    c_tol: float
    plant_uncertainty: bool
    percentiles: dict[str, dict[str, float]]
    yield_fraction: float
    unstable_fraction: float
    undecided_fraction: float = 0.0
    crossings: str | tuple[float, float] = "all"
    nominal_stable: bool | None = None

    def to_dict(self) -> dict[str, Any]:
        return {"draws": self.draws, "seed": self.seed, "r_tol": self.r_tol, "c_tol": self.c_tol,
                "plant_uncertainty": self.plant_uncertainty,
                "percentiles": {k: dict(v) for k, v in self.percentiles.items()},
                "yield": self.yield_fraction, "unstable_fraction": self.unstable_fraction,
                "undecided_fraction": self.undecided_fraction,
                "nominal_stable": self.nominal_stable,
                "crossings": self.crossings if isinstance(self.crossings, str)
                else list(self.crossings)}

    @classmethod
    def from_dict(cls, d: dict[str, Any] | None) -> Spread | None:
        from benchfit.fileio import as_float

        if not d:
            return None
        return cls(draws=int(d["draws"]), seed=d.get("seed"), r_tol=float(d["r_tol"]),
                   c_tol=float(d["c_tol"]), plant_uncertainty=bool(d["plant_uncertainty"]),
                   percentiles={k: {p: as_float(x) for p, x in v.items()}
                                for k, v in d["percentiles"].items()},
                   yield_fraction=float(d["yield"]),
                   unstable_fraction=float(d.get("unstable_fraction", 0.0)),
                   undecided_fraction=float(d.get("undecided_fraction", 0.0)),
                   crossings=check_crossings(d.get("crossings", "all")),
                   nominal_stable=d.get("nominal_stable"))

    def report(self) -> str:
        """The table: main-crossover rows, and (when they differ anywhere) the worst over every
        counted crossing, first of all a line saying when the nominal loop is unstable."""
        pc = self.percentiles
        lines = []
        if self.nominal_stable is False:
            lines.append("the nominal loop is UNSTABLE: the percentiles below are of draws around "
                         "an unstable loop (see the worst-crossing rows)")
        lines += [f"Monte Carlo: {self.draws} draws, R ±{numfmt.sig(self.r_tol * 100)} %, "
                  f"C ±{numfmt.sig(self.c_tol * 100)} %"
                  + (", plant from fit covariance" if self.plant_uncertainty else ""),
                  "                 " + "".join(f"{str(p) + ' %':>12}" for p in PERCENTILES)]
        rows = [("pm_deg", "phase margin", numfmt.deg)]
        if "pm_worst_deg" in pc and pc["pm_worst_deg"] != pc["pm_deg"]:
            rows.append(("pm_worst_deg", "PM, worst cross.", numfmt.deg))
        rows.append(("gm_db", "gain margin", _gain_margin_cell))
        if "gm_worst_db" in pc and pc["gm_worst_db"] != pc["gm_db"]:
            rows.append(("gm_worst_db", "GM, nearest 0 dB", _gain_margin_cell))
        rows.append(("crossover_hz", "crossover", lambda v: numfmt.eng(v, "Hz")))
        for key, label, fmt in rows:
            lines.append(f"{label:17}" + "".join(f"{fmt(pc[key][f'p{p}']):>12}" for p in PERCENTILES))
        if len(rows) > 3:
            lines.append("(phase margin, gain margin: main crossover and smallest positive GM; the "
                         "'worst'/'nearest 0 dB' rows take every counted crossing, a negative GM "
                         "where |T| > 1 at a phase crossing)")
        if any(math.isinf(v) and v > 0 for v in pc["gm_db"].values()):
            lines.append("(gain margin 'no crossing': those draws have no phase crossing where |T| < 1 in the band)")
        undecided = (f", stability undecided {numfmt.pct(self.undecided_fraction)}"
                     if self.undecided_fraction else "")
        lines.append(f"yield {numfmt.pct(self.yield_fraction)} "
                     f"(unstable {numfmt.pct(self.unstable_fraction)}{undecided}; "
                     f"counting {describe(self.crossings)})")
        return "\n".join(lines)


def worst_crossings(n: int, gains: tuple, phases: tuple,
                    which: str | tuple[float, float]) -> tuple[np.ndarray, np.ndarray]:
    """Per row: the smallest phase margin over the counted gain crossings, and the counted
    phase crossing's gain margin nearest 0 dB (signed: negative where |T| > 1 there).

    The crossings counted are those the yield counts (:func:`benchfit.loop.passrules.crossing_counts`;
    under "main" every crossing is shown, as the yield then judges the main pair only), so a
    resonance that crosses 0 dB again shows in the table, not only in the yield.  Rows with no
    gain crossing get +inf PM, rows with no phase crossing +inf GM.
    """
    from benchfit.loop.passrules import crossing_counts

    which = "all" if which == "main" else which
    pm = np.full(n, np.inf)
    gm = np.full(n, np.inf)
    for (rows, f, v), out, key in ((gains, pm, None), (phases, gm, "abs")):
        rows, f, v = (np.asarray(a) for a in (rows, f, v))
        if not rows.size:
            continue
        keep = crossing_counts(f, np.zeros(np.shape(f), bool), which) & ~np.isnan(v)
        rows, v = rows[keep].astype(int), v[keep].astype(float)
        if key is None:
            np.minimum.at(out, rows, v)
            continue
        best = np.full(n, np.inf)
        np.minimum.at(best, rows, np.abs(v))
        hit = np.abs(v) == best[rows]
        out[rows[hit]] = v[hit]
    return pm, gm


def _gain_margin_cell(v: float) -> str:
    """A gain-margin percentile: 'no crossing' where the draws have no phase crossing (GM = +inf)."""
    return "no crossing" if math.isinf(v) and v > 0 else numfmt.db(v)


def _check_tol(v: float, what: str) -> float:
    v = float(v)
    if not (math.isfinite(v) and 0 <= v < 1):
        raise InputError(f"{what} tolerance {v!r}; expected a fraction 0 <= tol < 1",
                         source="--tolerance")
    return v


def draw_margins(corners: LoopPlant | Sequence[LoopPlant], network: Network,
                 opamp: OpAmp | None, targets: Targets, *, r_tol: float, c_tol: float,
                 draws: int = 10_000, seed: int | None = None, plant_uncertainty: bool = True,
                 freq_hz: np.ndarray | None = None,
                 crossings: str | tuple[float, float] = "all") -> dict[str, Any]:
    """The margins of every draw (worst corner of each): the arrays behind :func:`monte_carlo`.

    Parameters are those of :func:`monte_carlo`.

    Returns
    -------
    dict
        ``pm_deg``, ``gm_db``, ``crossover_hz`` (shape (draws,); PM −inf where
        the band never reaches the crossover), ``stable`` (verdict "stable" on
        every corner), ``undecided`` (some corner's verdict undecided) and
        ``passed`` (:func:`benchfit.loop.passrules.draws_pass` on every
        corner), ``pm_worst_deg`` and ``gm_worst_db`` (:func:`worst_crossings`, worst
        corner), and ``plant_uncertainty`` (True when some plant was drawn).
    """
    from benchfit.loop.margins import margins_batch

    corners = [corners] if isinstance(corners, LoopPlant) else list(corners)
    r_tol = _check_tol(r_tol, "resistor")
    c_tol = _check_tol(c_tol, "capacitor")
    crossings = check_crossings(crossings)
    if isinstance(draws, bool) or int(draws) != draws or draws < 1:
        raise InputError(f"draws {draws!r}; expected a whole number >= 1", source="--draws")
    draws = int(draws)
    rng = np.random.default_rng(seed)
    names = list(network.parts)
    tol = np.array([r_tol if n[0] == "R" else c_tol for n in names])
    factors = 1.0 + tol * rng.uniform(-1.0, 1.0, size=(draws, len(names)))
    div_f = 1.0 + r_tol * rng.uniform(-1.0, 1.0, size=(draws, 2))

    pm_w = np.full(draws, np.inf)
    gm_w = np.full(draws, np.inf)
    pm_x = np.full(draws, np.inf)   # worst over the counted crossings (worst_crossings)
    gm_x = np.full(draws, np.inf)
    fc_w = np.full(draws, np.nan)
    stable_all = np.ones(draws, dtype=bool)
    undecided = np.zeros(draws, dtype=bool)
    passed = np.ones(draws, dtype=bool)
    used_plant = False
    for lp in corners:
        f = freq_hz if freq_hz is not None else feature_grid(lp, network, opamp)
        nominal_p = lp.plant.response(f) if not lp.is_data else lp.response(f) / lp.sensing.gain
        n_int = None if lp.is_data else integrators_of(lp, network, opamp)
        for a in range(0, draws, _CHUNK):
            b = min(draws, a + _CHUNK)
            vals = {n: network.parts[n] * factors[a:b, i:i + 1] for i, n in enumerate(names)}
            c = network.response(f, opamp, vals)
            if plant_uncertainty and lp.draws is not None:
                p = np.asarray(lp.draws(f, b - a, rng), dtype=complex)
                used_plant = True
            else:
                p = nominal_p[None, :]
            t = p * lp.sensing.gain_draws(div_f[a:b]) * c
            out = margins_batch(f, t, unstable_open_loop_poles=lp.unstable_poles,
                                integrators=n_int, live_db=None if lp.is_data else LIVE_DB)
            stable = np.asarray(out["stable"], dtype=bool)
            pm = np.asarray(out["pm_deg"], dtype=float)
            gm = np.asarray(out["gm_db"], dtype=float)
            passed[a:b] &= draws_pass(stable, pm, gm, out["gains_pm_deg"],
                                      out["phases_gm_db"], targets, crossings)
            wp, wg = worst_crossings(b - a, out["gains_pm_deg"], out["phases_gm_db"], crossings)
            pm_x[a:b] = np.minimum(pm_x[a:b], np.where(np.isnan(pm), -np.inf, np.minimum(pm, wp)))
            gm_x[a:b] = np.where(np.abs(wg) < np.abs(gm_x[a:b]), wg, gm_x[a:b])
            pm = np.where(np.isnan(pm), -np.inf, pm)
            worse = pm < pm_w[a:b]
            fc_w[a:b] = np.where(worse, out["crossover_hz"], fc_w[a:b])
            pm_w[a:b] = np.minimum(pm_w[a:b], pm)
            gm_w[a:b] = np.minimum(gm_w[a:b], gm)
            stable_all[a:b] &= stable
            undecided[a:b] |= np.asarray(out["verdict"]) == "undecided"
    return {"pm_deg": pm_w, "gm_db": gm_w, "crossover_hz": fc_w, "stable": stable_all,
            "pm_worst_deg": pm_x, "gm_worst_db": gm_x,
            "undecided": undecided, "passed": passed, "plant_uncertainty": used_plant,
            "r_tol": r_tol, "c_tol": c_tol, "draws": draws, "crossings": crossings}


def integrators_of(lp: LoopPlant, network: Network, opamp: OpAmp | None) -> int:
    """Poles at s = 0 of the nominal loop model (the count the nominal margins use)."""
    return int(np.sum(Loop(lp, network, opamp).model().poles == 0))


def monte_carlo(corners: LoopPlant | Sequence[LoopPlant], network: Network,
                opamp: OpAmp | None, targets: Targets, *, r_tol: float, c_tol: float,
                draws: int = 10_000, seed: int | None = None,
                plant_uncertainty: bool = True, freq_hz: np.ndarray | None = None,
                crossings: str | tuple[float, float] = "all") -> Spread:
    """Spread of phase margin, gain margin and crossover over random parts (and plants).

    Parameters
    ----------
    corners
        Plant(s) with sensing; a corner with ``draws`` set contributes its
        fit uncertainty when ``plant_uncertainty`` is true.
    network
        Nominal part values.
    opamp
        Finite op-amp (its parameters are not varied), or None.
    targets
        Margin minimums for the yield.
    r_tol, c_tol
        Resistor and capacitor tolerance, fractions (0.01 = 1 %).
    draws
        Number of draws (>= 1).
    seed
        Seed for numpy's default generator; the same seed gives the same result.
    plant_uncertainty
        Draw plant responses from the fits' covariances where available.
    freq_hz
        Evaluation grid; by default :func:`benchfit.loop.featuregrid.feature_grid`
        (the plant's and network's poles and zeros and the nominal crossings,
        refined around each), or a measured plant's own frequencies.
    crossings
        Which crossings count for the yield: "all" (default: every gain
        crossing must meet the phase-margin target and every phase crossing
        the gain-margin target), "main", or a band (f_lo_hz, f_hi_hz)
        (:mod:`benchfit.loop.passrules`).

    Returns
    -------
    Spread
    """
    d = draw_margins(corners, network, opamp, targets, r_tol=r_tol, c_tol=c_tol, draws=draws,
                     seed=seed, plant_uncertainty=plant_uncertainty, freq_hz=freq_hz,
                     crossings=crossings)
    pcs: dict[str, dict[str, float]] = {}
    for key in ("pm_deg", "gm_db", "crossover_hz", "pm_worst_deg", "gm_worst_db"):
        arr = d[key]
        # inf GM (no phase crossing) stays inf in the upper percentiles, as it should
        vals = np.percentile(np.where(np.isnan(arr), -np.inf, arr), PERCENTILES,
                             method="inverted_cdf")
        if key == "gm_worst_db":  # percentiles of the distance from 0 dB, shown signed
            order = np.argsort(np.abs(arr), kind="stable")
            idx = np.clip(np.ceil(np.array(PERCENTILES) / 100 * arr.size).astype(int) - 1, 0,
                          arr.size - 1)
            vals = arr[order][idx]
        pcs[key] = {f"p{p}": float(v) for p, v in zip(PERCENTILES, vals, strict=True)}
    nom = draw_margins(corners, network, opamp, targets, r_tol=0.0, c_tol=0.0, draws=1,
                       plant_uncertainty=False, freq_hz=freq_hz, crossings=crossings)
    return Spread(draws=d["draws"], seed=seed, r_tol=d["r_tol"], c_tol=d["c_tol"],
                  plant_uncertainty=d["plant_uncertainty"], percentiles=pcs,
                  yield_fraction=float(d["passed"].mean()),
                  unstable_fraction=float(np.mean(~d["stable"] & ~d["undecided"])),
                  undecided_fraction=float(d["undecided"].mean()),
                  crossings=d["crossings"],
                  nominal_stable=bool(nom["stable"][0]) if not nom["undecided"][0] else None)
