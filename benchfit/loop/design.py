"""A compensation design from plant to orderable parts: the :class:`Design` result.

:func:`design` ties the steps together:

1. synthesise the network (:mod:`benchfit.loop.synthesis`) on the plant(s);
2. snap every resistor to the resistor E-series and every capacitor to the
   capacitor series (:mod:`benchfit.loop.eseries`, log-nearest);
3. re-verify the loop with the snapped parts and the finite op-amp, on every
   plant corner, from the model (dense, exact) or the measured data;
4. Monte Carlo over part tolerances and plant uncertainty
   (:mod:`benchfit.loop.tolerance`);
5. warn about parts outside a practical range, an op-amp too slow for the
   crossover, and targets not met.

:func:`check_parts` predicts a given set of parts (what is on the board now)
against the plant(s), reusing a design's network, sensing and op-amp.

Signs: ``compensator`` holds C with the error amplifier's inversion folded
into the loop sign, so T = plant · sensing · compensator is the return ratio
and PM = 180° + ∠T at crossover (see :mod:`benchfit.loop.networks`).
"""


from __future__ import annotations

from collections.abc import Sequence
from dataclasses import replace

import numpy as np

from benchfit.errors import DesignError, InputError
from benchfit.loop import eseries
from benchfit.loop.designresult import Design, _eng
from benchfit.loop.loopgain import LoopPlant
from benchfit.loop.networks import Network, check_kind
from benchfit.loop.opamp import OpAmp
from benchfit.loop.passrules import check_crossings
from benchfit.loop.prediction import (
    OPAMP_PHASE_WARN_DEG,
    Prediction,
    opamp_warnings,
    predict,
    sign_warnings,
    target_warnings,
)
from benchfit.loop.snapping import series_neighbours, snap_network, snap_search
from benchfit.loop.synthesis import Targets, synthesize
from benchfit.loop.tolerance import Spread, monte_carlo
from benchfit.provenance import Provenance

__all__ = ["Design", "Prediction", "design", "check_parts", "with_parts", "predict",
           "snap_network", "snap_search", "series_neighbours", "sign_warnings",
           "opamp_warnings", "target_warnings", "OPAMP_PHASE_WARN_DEG", "_eng"]

#: Yield below which a warning is given (common practice, no source).
YIELD_WARN = 0.9


def _series_tolerance(tolerances: tuple[float | None, float | None] | None,
                      r_series: str, c_series: str) -> tuple[float, float]:
    rt, ct = tolerances if tolerances is not None else (None, None)
    return (eseries.tolerance(r_series) if rt is None else float(rt),
            eseries.tolerance(c_series) if ct is None else float(ct))


def design(corners: LoopPlant | Sequence[LoopPlant], kind: str, targets: Targets, *,
           method: str = "k-factor", r_in: float = 10e3, opamp: OpAmp | None = None,
           series: tuple[str, str] = ("E24", "E12"),
           tolerances: tuple[float | None, float | None] | None = None,
           draws: int = 2000, seed: int | None = None,
           sources: Sequence[str] = (), min_yield: float | None = None,
           crossings: str | tuple[float, float] = "all") -> Design:
    """Synthesise, snap, re-verify and spread a compensation network.

    Parameters
    ----------
    corners
        Plant(s) with their sensing (all corners must share one sensing).
    kind
        'type1', 'type2', 'type3' or 'pi'.
    targets
        Crossover (None = automatic), phase margin and gain margin targets.
    method
        'k-factor' or 'crossing'.
    r_in
        Input resistor R1, ohm.
    opamp
        Finite op-amp or None (ideal).
    series
        (resistor series, capacitor series), e.g. ('E96', 'E12').
    tolerances
        (R, C) tolerance fractions; None entries default to the series' tolerance.
    draws
        Monte Carlo draws (0 for none).
    seed
        Random seed for the Monte Carlo.
    sources
        Input file names, for the provenance.
    min_yield
        Fraction of Monte Carlo draws that must meet the targets (e.g. 0.95),
        or None.  Synthesis at the targets themselves leaves the nominal design
        on the edge, so about half the spread falls short; with ``min_yield``
        the network is designed for more phase (and gain) margin, by the
        shortfall of the draws' low percentile, until the yield is reached
        (a few rounds at most).  The targets reported stay the minimums asked.
    crossings
        Which crossings must meet the targets, for ``targets_met``, the
        warnings, the snapping and the yield alike: "all" (every gain
        crossing the phase-margin target, every phase crossing the
        gain-margin target), "main" or a band (f_lo_hz, f_hi_hz)
        (:mod:`benchfit.loop.passrules`).  No slack: a margin 0.01 short of
        its target misses it.

    Returns
    -------
    Design
    """
    corners = (corners,) if isinstance(corners, LoopPlant) else tuple(corners)
    if not corners:
        raise InputError("no plant given")
    if min_yield is not None and not (0.0 < min_yield < 1.0):
        raise InputError(f"minimum yield {min_yield!r}; expected a fraction between 0 and 1 "
                         "(a percentage below 100)", source="--min-yield")
    if min_yield is not None and not draws:
        raise InputError("a minimum yield needs Monte Carlo draws; expected --draws above 0",
                         source="--min-yield")
    kind = check_kind(kind)
    crossings = check_crossings(crossings)
    r_series, c_series = (eseries._key(series[0]), eseries._key(series[1]))
    r_tol, c_tol = _series_tolerance(tolerances, r_series, c_series)
    aim = targets  # what the network is synthesised for (>= the targets)
    spread = None
    for _ in range(YIELD_ROUNDS):
        try:
            syn_try = synthesize(kind, corners, aim, method=method, r_in=r_in, opamp=opamp,
                                 crossings=crossings)
        except DesignError:
            if aim is targets:
                raise
            break  # more margin than this plant allows: keep the last design
        syn, used = syn_try, aim
        snapped_net, how = snap_search(syn.network, corners, opamp, aim, syn.crossover_hz,
                                       r_series, c_series, crossings)
        if not draws:
            break
        spread = monte_carlo(corners, snapped_net, opamp, targets, r_tol=r_tol, c_tol=c_tol,
                             draws=draws, seed=seed, crossings=crossings)
        if min_yield is None or spread.yield_fraction >= min_yield:
            break
        aim = _more_margin(aim, targets, spread, min_yield)
    ideal = predict(corners, syn.network, opamp)
    snapped = predict(corners, snapped_net, opamp)
    names = [lp.name for lp in corners]
    # the automatic-crossover remark is information (kept in synthesis.notes), not a warning;
    # synthesis's own "targets not met" figures come from its screening grid: the warnings
    # below quote the dense margins the tables show instead
    warnings = [n for n in syn.notes if "meeting the targets with parts in the practical" not in n
                and not n.startswith("targets not met at")]
    warnings = [w for lp in corners for w in lp.warnings] + warnings  # what reading/fitting said
    warnings += sign_warnings(corners)
    warnings += snapped_net.practical_warnings("snapped")
    warnings += opamp_warnings(syn.network, opamp, syn.crossover_hz)
    if any(n.startswith("targets not met at") for n in syn.notes):
        mi = ideal.worst_margins()
        warnings.append(f"targets not met at {syn.crossover_hz:.4g} Hz: worst phase margin "
                        f"{mi.phase_margin_deg:.1f}°, worst gain margin {mi.gain_margin_db:.1f} dB "
                        "(ideal parts)")
    warnings += target_warnings(ideal, targets, names, "ideal", crossings)
    warnings += target_warnings(snapped, targets, names, "snapped", crossings)
    warnings += [f"{names[snapped.worst]}: {w}" for w in snapped.worst_margins().warnings]
    if spread is not None:
        if min_yield is not None and spread.yield_fraction < min_yield:
            warnings.append(f"the {min_yield * 100:g} % yield asked for was not reached: "
                            f"{spread.yield_fraction * 100:.1f} % when designed for PM "
                            f"{used.phase_margin_deg:.1f}°, GM {used.gain_margin_db:.1f} dB "
                            "(more margin could not be synthesised, or the rounds ran out)")
        elif spread.yield_fraction < YIELD_WARN:
            warnings.append(f"only {spread.yield_fraction * 100:.1f} % of {spread.draws} Monte Carlo "
                            "draws meet the targets with part tolerances "
                            f"R ±{r_tol * 100:g} %, C ±{c_tol * 100:g} %")
    settings = {"network": kind, "method": method, "r_in": r_in, "targets": targets.to_dict(),
                "opamp": None if opamp is None else opamp.to_dict(),
                "series": [r_series, c_series], "tolerances": [r_tol, c_tol],
                "draws": draws, "seed": seed, "snapping": how, "min_yield": min_yield,
                "designed_for": used.to_dict(),
                "crossings": crossings if isinstance(crossings, str) else list(crossings)}
    return Design(kind=kind, method=method, ideal=ideal, snapped=snapped, corners=corners,
                  sensing=corners[0].sensing, opamp=opamp, targets=targets,
                  series={"resistor": r_series, "capacitor": c_series}, synthesis=syn,
                  spread=spread, warnings=tuple(dict.fromkeys(warnings)),
                  provenance=Provenance(step="design", sources=tuple(sources), settings=settings,
                                        parents=tuple(lp.plant.provenance.to_dict()
                                                      for lp in corners)))


#: Redesign rounds allowed to reach a minimum yield.
YIELD_ROUNDS = 6


def _more_margin(aim: Targets, targets: Targets, spread: Spread, min_yield: float) -> Targets:
    """Targets to synthesise for next: ``aim`` raised by how far the draws' low
    percentile (p1 for a yield above 95 %, else p5) falls short of ``targets``."""
    q = "p1" if min_yield > 0.95 else "p5"
    pm_short = targets.phase_margin_deg - spread.percentiles["pm_deg"][q]
    gm_short = targets.gain_margin_db - spread.percentiles["gm_db"][q]
    pm_step = max(pm_short, 0.0) + 0.5 if np.isfinite(pm_short) else 5.0
    gm_step = max(gm_short, 0.0) if np.isfinite(gm_short) else 0.0
    return replace(aim, phase_margin_deg=min(aim.phase_margin_deg + pm_step, 89.0),
                   gain_margin_db=aim.gain_margin_db + gm_step)


def check_parts(corners: LoopPlant | Sequence[LoopPlant], network: Network, *,
                opamp: OpAmp | None = None, targets: Targets | None = None,
                tolerances: tuple[float, float] = (0.01, 0.1), draws: int = 0,
                seed: int | None = None, sources: Sequence[str] = (),
                crossings: str | tuple[float, float] = "all") -> Design:
    """Predict the loop with a given set of parts (no synthesis, no snapping).

    The result is a :class:`Design` whose ideal and snapped predictions are the
    same parts, with method 'check'.  ``crossings`` is as for :func:`design`.
    """
    corners = (corners,) if isinstance(corners, LoopPlant) else tuple(corners)
    crossings = check_crossings(crossings)
    targets = targets or Targets()
    pred = predict(corners, network, opamp)
    names = [lp.name for lp in corners]
    m = pred.worst_margins()
    warnings = [w for lp in corners for w in lp.warnings] + sign_warnings(corners)
    warnings += network.practical_warnings("given")
    warnings += opamp_warnings(network, opamp, m.crossover_hz)
    warnings += target_warnings(pred, targets, names, "given", crossings)
    warnings += [f"{names[pred.worst]}: {w}" for w in m.warnings]
    spread = None
    if draws:
        spread = monte_carlo(corners, network, opamp, targets, r_tol=tolerances[0],
                             c_tol=tolerances[1], draws=draws, seed=seed, crossings=crossings)
    return Design(kind=network.kind, method="check", ideal=pred, snapped=pred, corners=corners,
                  sensing=corners[0].sensing, opamp=opamp, targets=targets,
                  series={"resistor": "given", "capacitor": "given"}, synthesis=None,
                  spread=spread, warnings=tuple(dict.fromkeys(warnings)),
                  provenance=Provenance(step="check", sources=tuple(sources),
                                        settings={"network": network.to_dict(),
                                                  "opamp": None if opamp is None
                                                  else opamp.to_dict(),
                                                  "targets": targets.to_dict(),
                                                  "crossings": crossings
                                                  if isinstance(crossings, str)
                                                  else list(crossings)}))


def with_parts(net: Network, overrides: dict[str, float]) -> Network:
    """``net`` with some parts replaced (names checked)."""
    unknown = [k for k in overrides if k not in net.parts]
    if unknown:
        raise InputError(f"part(s) {', '.join(unknown)} not in a {net.kind} network "
                         f"(it has {', '.join(net.parts)})", source="--parts")
    return replace(net, parts={**net.parts, **overrides})
