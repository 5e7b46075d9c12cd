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

import math
import os
from collections.abc import Sequence
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np

from benchfit import numfmt
from benchfit.data.response import FrequencyResponse
from benchfit.errors import DesignError, InputError
from benchfit.fileio import malformed_as_input_error, read_json, to_json_text, write_json_atomic
from benchfit.fitting.model import PlantModel
from benchfit.loop import eseries
from benchfit.loop.loopgain import Loop, LoopPlant
from benchfit.loop.margins import Margins
from benchfit.loop.networks import Network, check_kind, network_label
from benchfit.loop.opamp import OpAmp
from benchfit.loop.sensing import Sensing
from benchfit.loop.synthesis import Synthesis, Targets, synthesize
from benchfit.loop.tolerance import Spread, monte_carlo
from benchfit.provenance import Provenance

#: Op-amp phase lost at the crossover that earns a warning, degrees.
OPAMP_PHASE_WARN_DEG = 3.0
#: Slack when judging a predicted margin against its target.
MARGIN_SLACK = 0.1
#: Yield below which a warning is given (common practice, no source).
YIELD_WARN = 0.9


def _plant_dict(lp: LoopPlant) -> dict[str, Any]:
    return {"name": lp.name, "band_hz": list(lp.band_hz), "plant": lp.plant.to_dict()}


def _plant_from_dict(d: dict[str, Any], sensing: Sensing) -> LoopPlant:
    p = d["plant"]
    plant = FrequencyResponse.from_dict(p) if p.get("kind") == "frequency_response" \
        else PlantModel.from_dict(p)
    return LoopPlant(plant, sensing, name=str(d.get("name", "plant")),
                     band_hz=tuple(d["band_hz"]) if d.get("band_hz") else None)


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
                targets: Targets, fc_hz: float, r_series: str,
                c_series: str) -> tuple[Network, str]:
    """Snap parts to their series, trying each part's lower and upper neighbour.

    Log-nearest snapping alone can lose a degree or two of phase margin.  All
    combinations of rounding each part down or up (at most 2⁶ = 64 sets) are
    evaluated at once; among the sets that meet the targets on every corner,
    the one whose crossover is closest to ``fc_hz`` (on the first corner) is
    kept.  When none meets them, the log-nearest set is returned.

    Returns
    -------
    network, how
        ``how`` is "nearest" or "neighbour search".
    """
    from benchfit.loop.margins import margins_batch

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
        out = margins_batch(f, t, unstable_open_loop_poles=lp.unstable_poles)
        pm = np.nan_to_num(np.asarray(out["pm_deg"], dtype=float), nan=-np.inf)
        ok &= np.asarray(out["stable"], dtype=bool) & (pm >= targets.phase_margin_deg + MARGIN_SLACK)
        ok &= np.asarray(out["gm_db"], dtype=float) >= targets.gain_margin_db + MARGIN_SLACK
        if i == 0:
            dist = np.abs(np.log(np.asarray(out["crossover_hz"], dtype=float) / fc_hz))
    if not ok.any():
        return nearest, "nearest"
    nearest_row = np.array([nearest.parts[n] for n in names])
    if ok[np.all(np.isclose(combos, nearest_row, rtol=1e-9, atol=0.0), axis=1)].any():
        return nearest, "nearest"
    best = int(np.argmin(np.where(ok, np.nan_to_num(dist, nan=np.inf), np.inf)))
    return Network(net.kind, {n: float(combos[best, i]) for i, n in enumerate(names)}), \
        "neighbour search"


def sign_warnings(corners: Sequence[LoopPlant]) -> list[str]:
    """Warn when plant · sensing is inverting at low frequency.

    The compensator folds the error amplifier's inversion into the loop sign;
    an inverting plant (e.g. through an optocoupler) then makes the feedback
    positive.  A low-frequency phase beyond ±90° (after removing integrators'
    −90° each; beyond ±150° for measured data) is the sign of that.
    """
    out = []
    for lp in corners:
        f0 = lp.band_hz[0]
        ph = math.degrees(np.angle(lp.response(np.array([f0]))[0]))
        if not lp.is_data:
            ph += 90.0 * int(np.sum(np.abs(lp.plant.poles) == 0))
            ph -= 90.0 * int(np.sum(np.abs(lp.plant.zeros) == 0))
        ph = 180.0 - ((180.0 - ph) % 360.0)
        # data: integrators cannot be told apart, so only a clear inversion counts
        if abs(ph) > (150.0 if lp.is_data else 90.0):
            out.append(f"{lp.name}: plant · sensing is inverting at {f0:.4g} Hz (phase "
                       f"{ph:.0f}°): with an inverting error amplifier the feedback is positive; "
                       "use a negative sensing gain or a non-inverting error amplifier")
    return out


def opamp_warnings(net: Network, opamp: OpAmp | None, fc_hz: float) -> list[str]:
    """Warn when the op-amp costs visible phase or gain at the crossover."""
    if opamp is None or not np.isfinite(fc_hz):
        return []
    f = np.array([fc_hz])
    ideal = net.response(f)[0]
    real = net.response(f, opamp)[0]
    dphi = math.degrees(np.angle(ideal / real))
    ddb = 20 * math.log10(abs(ideal / real))
    if dphi > OPAMP_PHASE_WARN_DEG or abs(ddb) > 1.0:
        return [f"op-amp GBW {opamp.gbw_hz:.4g} Hz is too close to the {fc_hz:.4g} Hz crossover: "
                f"it costs {dphi:.1f}° of phase and {ddb:.1f} dB of gain there (included in the "
                "predictions, but the op-amp's own spread is not); choose a faster op-amp or a "
                "lower crossover"]
    return []


@dataclass(frozen=True, eq=False)
class Prediction:
    """Margins of one part set on every plant corner."""

    network: Network
    compensator: PlantModel
    corners: tuple[Margins, ...]
    loops: tuple[PlantModel | FrequencyResponse, ...]

    @property
    def worst(self) -> int:
        pm = [m.phase_margin_deg if m.closed_loop_stable else -math.inf for m in self.corners]
        pm = [-math.inf if math.isnan(p) else p for p in pm]
        return int(np.argmin(pm))

    def worst_margins(self) -> Margins:
        return self.corners[self.worst]


def predict(corners: Sequence[LoopPlant], net: Network, opamp: OpAmp | None) -> Prediction:
    """Margins of ``net`` with ``opamp`` on every corner."""
    loops = [Loop(lp, net, opamp) for lp in corners]
    return Prediction(network=net, compensator=net.model(opamp),
                      corners=tuple(lo.margins() for lo in loops),
                      loops=tuple(lo.data() if lo.plant.is_data else lo.model() for lo in loops))


def target_warnings(pred: Prediction, targets: Targets, names: Sequence[str],
                    label: str) -> list[str]:
    out = []
    for m, name in zip(pred.corners, names, strict=True):
        where = f"{label} parts on {name}" if len(names) > 1 else f"{label} parts"
        if not m.closed_loop_stable:
            out.append(f"{where}: the closed loop is unstable")
            continue
        if not (m.phase_margin_deg >= targets.phase_margin_deg - MARGIN_SLACK):
            out.append(f"{where}: phase margin {m.phase_margin_deg:.1f}° is below the "
                       f"{targets.phase_margin_deg:g}° target")
        if m.gain_margin_db < targets.gain_margin_db - MARGIN_SLACK:
            out.append(f"{where}: gain margin {m.gain_margin_db:.1f} dB is below the "
                       f"{targets.gain_margin_db:g} dB target")
    return out


@dataclass(frozen=True, eq=False)
class Design:
    """A designed compensation network with ideal and snapped parts and their predictions.

    Attributes
    ----------
    kind
        'type1', 'type2', 'type3' or 'pi'.
    method
        'k-factor' or 'crossing' ('check' for a prediction of given parts).
    ideal, snapped
        Predictions (parts, compensator model, margins on every corner) for
        the synthesised and the E-series parts.
    corners
        The plants (with sensing) the design was made for; the first is nominal.
    sensing
        Sensing gain or divider.
    opamp
        Finite op-amp, or None for an ideal one.
    targets
        Crossover and margin targets.
    series
        ``{"resistor": "E24", "capacitor": "E12"}``.
    synthesis
        How the network was placed (None for a check).
    spread
        Monte Carlo of the snapped parts (None when no draws were asked for).
    warnings
        Plain-language warnings.
    provenance
        What produced this design.
    """

    kind: str
    method: str
    ideal: Prediction
    snapped: Prediction
    corners: tuple[LoopPlant, ...]
    sensing: Sensing
    opamp: OpAmp | None
    targets: Targets
    series: dict[str, str]
    synthesis: Synthesis | None = None
    spread: Spread | None = None
    warnings: tuple[str, ...] = ()
    provenance: Provenance = field(default_factory=lambda: Provenance(step="design"))

    @property
    def targets_met(self) -> bool:
        """True when the snapped parts meet every target on every corner."""
        return not target_warnings(self.snapped, self.targets, self.corner_names, "snapped")

    @property
    def corner_names(self) -> list[str]:
        return [lp.name for lp in self.corners]

    def to_dict(self) -> dict[str, Any]:
        data = self.corners[0].is_data
        loops_key = "loop_data" if data else "loop_model"
        wi, ws = self.ideal.worst, self.snapped.worst
        return {
            "kind": "design",
            "network": self.kind,
            "method": self.method,
            "components": {"ideal": dict(self.ideal.network.parts),
                           "snapped": dict(self.snapped.network.parts)},
            "compensator": {"ideal": self.ideal.compensator.to_dict(),
                            "snapped": self.snapped.compensator.to_dict()},
            "corners_hz": {"ideal": self.ideal.network.corners_hz(),
                           "snapped": self.snapped.network.corners_hz()},
            "sensing": self.sensing.to_dict(),
            "opamp": None if self.opamp is None else self.opamp.to_dict(),
            "plant": self.corners[0].plant.to_dict(),
            "corners": [_plant_dict(lp) for lp in self.corners],
            loops_key: {"ideal": self.ideal.loops[0].to_dict(),
                        "snapped": self.snapped.loops[0].to_dict()},
            "predicted": {"ideal": self.ideal.corners[wi].to_dict(),
                          "snapped": self.snapped.corners[ws].to_dict()},
            "predicted_corners": {"ideal": [m.to_dict() for m in self.ideal.corners],
                                  "snapped": [m.to_dict() for m in self.snapped.corners]},
            "worst_corner": {"ideal": self.corners[wi].name, "snapped": self.corners[ws].name},
            "targets_met": self.targets_met,
            "spread": None if self.spread is None else self.spread.to_dict(),
            "targets": self.targets.to_dict(),
            "series": dict(self.series),
            "synthesis": None if self.synthesis is None else self.synthesis.to_dict(),
            "warnings": list(self.warnings),
            "provenance": self.provenance.to_dict(),
        }

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> Design:
        if not isinstance(d, dict) or d.get("kind") != "design":
            raise InputError("not a design file (expected a JSON object with \"kind\": \"design\")")
        try:
            kind = check_kind(d["network"])
            sensing = Sensing.from_dict(d.get("sensing"))
            opamp = OpAmp.from_dict(d.get("opamp"))
            corners = tuple(_plant_from_dict(c, sensing) for c in d["corners"])
            loops_key = "loop_data" if "loop_data" in d else "loop_model"

            def pred(which: str) -> Prediction:
                net = Network(kind, d["components"][which])
                lp0 = d[loops_key][which]
                loop0 = (FrequencyResponse.from_dict(lp0) if loops_key == "loop_data"
                         else PlantModel.from_dict(lp0))
                margins = tuple(Margins.from_dict(m) for m in d["predicted_corners"][which])
                return Prediction(network=net,
                                  compensator=PlantModel.from_dict(d["compensator"][which]),
                                  corners=margins, loops=(loop0,))

            syn = d.get("synthesis")
            return cls(
                kind=kind, method=str(d.get("method", "k-factor")),
                ideal=pred("ideal"), snapped=pred("snapped"), corners=corners,
                sensing=sensing, opamp=opamp, targets=Targets.from_dict(d.get("targets")),
                series=dict(d.get("series", {})),
                synthesis=None if not syn else Synthesis(
                    network=Network.from_dict(syn["network"]), method=syn["method"],
                    crossover_hz=float(syn["crossover_hz"]),
                    plant_phase_deg=float(syn["plant_phase_deg"]),
                    boost_deg=float(syn["boost_deg"]), k=float(syn["k"]),
                    design_pm_deg=float(syn["design_pm_deg"]),
                    rate_of_closure_db=float(syn["rate_of_closure_db"]),
                    notes=tuple(syn.get("notes", ()))),
                spread=Spread.from_dict(d.get("spread")),
                warnings=tuple(d.get("warnings", ())),
                provenance=Provenance.from_dict(d.get("provenance")),
            )
        except (KeyError, TypeError, ValueError) as e:
            raise InputError(f"design file is incomplete or malformed ({type(e).__name__}: {e})") from None

    def to_json(self, path: str | os.PathLike) -> None:
        write_json_atomic(path, self.to_dict())

    def to_json_text(self) -> str:
        return to_json_text(self.to_dict())

    @classmethod
    def from_json(cls, path: str | os.PathLike) -> Design:
        with malformed_as_input_error(path, "design file"):
            return cls.from_dict(read_json(path))

    def report(self) -> str:
        """A plain-text summary: parts, margins (ideal and snapped), spread, warnings."""
        lines = [f"{network_label(self.kind)} network, {self.method}"
                 + (f", {len(self.corners)} plant corners" if len(self.corners) > 1 else "")]
        if self.synthesis is not None:
            s = self.synthesis
            auto = " (chosen automatically)" if self.targets.crossover_hz is None else ""
            lines.append(f"placed for crossover {numfmt.eng(s.crossover_hz, 'Hz')}{auto}: plant phase "
                         f"{numfmt.deg(s.plant_phase_deg)}, boost {numfmt.deg(s.boost_deg)}, "
                         f"K {numfmt.sig(s.k)}")
        given = self.method == "check"
        lines.append(f"{'part':6}{'given':>14}" if given else f"{'part':6}{'ideal':>14}{'snapped':>12}")
        for n, v in self.ideal.network.parts.items():
            unit = "ohm" if n[0] == "R" else "F"
            lines.append(f"{n:6}{_eng(v, unit):>14}"
                         + ("" if given else f"{_eng(self.snapped.network.parts[n], unit):>12}"))
        if not given:
            lines.append(f"series: R {self.series.get('resistor')}, C {self.series.get('capacitor')}")
        preds = (("given", self.snapped),) if given else (("ideal", self.ideal),
                                                           ("snapped", self.snapped))
        for label, p in preds:
            m = p.worst_margins()
            name = f" (worst: {self.corners[p.worst].name})" if len(self.corners) > 1 else ""
            gm = (f"GM {numfmt.db(m.gain_margin_db)} at {numfmt.eng(m.phase_crossover_hz, 'Hz')}"
                  if math.isfinite(m.gain_margin_db) else "GM not defined (no phase crossing in the band)")
            lines.append(f"{label:8} PM {numfmt.deg(m.phase_margin_deg):>6} at {numfmt.eng(m.crossover_hz, 'Hz')}, "
                         f"{gm}{name}"
                         + ("" if m.closed_loop_stable else "  UNSTABLE"))
        aim = self.provenance.settings.get("designed_for") or {}
        if aim and aim.get("phase_margin_deg") != self.targets.phase_margin_deg:
            lines.append(f"designed for PM {numfmt.deg(aim['phase_margin_deg'])}, GM "
                         f"{numfmt.db(aim['gain_margin_db'])} so that "
                         f"{numfmt.pct(self.provenance.settings.get('min_yield') or 0, 0)} of the draws meet "
                         f"the targets (PM ≥ {numfmt.deg(self.targets.phase_margin_deg)}, GM ≥ "
                         f"{numfmt.db(self.targets.gain_margin_db)})")
        if self.spread is not None:
            lines.append(self.spread.report())
        lines += [f"warning: {w}" for w in self.warnings]
        return "\n".join(lines)


def _eng(v: float, unit: str) -> str:
    return numfmt.eng(v, unit, numfmt.FIT_DIGITS)


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
           sources: Sequence[str] = (), min_yield: float | None = None) -> Design:
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
    r_series, c_series = (eseries._key(series[0]), eseries._key(series[1]))
    r_tol, c_tol = _series_tolerance(tolerances, r_series, c_series)
    aim = targets  # what the network is synthesised for (>= the targets)
    spread = None
    for _ in range(YIELD_ROUNDS):
        try:
            syn_try = synthesize(kind, corners, aim, method=method, r_in=r_in, opamp=opamp)
        except DesignError:
            if aim is targets:
                raise
            break  # more margin than this plant allows: keep the last design
        syn, used = syn_try, aim
        snapped_net, how = snap_search(syn.network, corners, opamp, aim, syn.crossover_hz,
                                       r_series, c_series)
        if not draws:
            break
        spread = monte_carlo(corners, snapped_net, opamp, targets, r_tol=r_tol, c_tol=c_tol,
                             draws=draws, seed=seed)
        if min_yield is None or spread.yield_fraction >= min_yield:
            break
        aim = _more_margin(aim, targets, spread, min_yield)
    ideal = predict(corners, syn.network, opamp)
    snapped = predict(corners, snapped_net, opamp)
    names = [lp.name for lp in corners]
    # the automatic-crossover remark is information (kept in synthesis.notes), not a warning
    warnings = [n for n in syn.notes if "meeting the targets with parts in the practical" not in n]
    warnings += sign_warnings(corners)
    warnings += snapped_net.practical_warnings("snapped")
    warnings += opamp_warnings(syn.network, opamp, syn.crossover_hz)
    warnings += target_warnings(ideal, targets, names, "ideal")
    warnings += target_warnings(snapped, targets, names, "snapped")
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
                "designed_for": used.to_dict()}
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
                seed: int | None = None, sources: Sequence[str] = ()) -> Design:
    """Predict the loop with a given set of parts (no synthesis, no snapping).

    The result is a :class:`Design` whose ideal and snapped predictions are the
    same parts, with method 'check'.
    """
    corners = (corners,) if isinstance(corners, LoopPlant) else tuple(corners)
    targets = targets or Targets()
    pred = predict(corners, network, opamp)
    names = [lp.name for lp in corners]
    m = pred.worst_margins()
    warnings = sign_warnings(corners) + network.practical_warnings("given")
    warnings += opamp_warnings(network, opamp, m.crossover_hz)
    warnings += target_warnings(pred, targets, names, "given")
    warnings += [f"{names[pred.worst]}: {w}" for w in m.warnings]
    spread = None
    if draws:
        spread = monte_carlo(corners, network, opamp, targets, r_tol=tolerances[0],
                             c_tol=tolerances[1], draws=draws, seed=seed)
    return Design(kind=network.kind, method="check", ideal=pred, snapped=pred, corners=corners,
                  sensing=corners[0].sensing, opamp=opamp, targets=targets,
                  series={"resistor": "given", "capacitor": "given"}, synthesis=None,
                  spread=spread, warnings=tuple(dict.fromkeys(warnings)),
                  provenance=Provenance(step="check", sources=tuple(sources),
                                        settings={"network": network.to_dict(),
                                                  "opamp": None if opamp is None
                                                  else opamp.to_dict(),
                                                  "targets": targets.to_dict()}))


def with_parts(net: Network, overrides: dict[str, float]) -> Network:
    """``net`` with some parts replaced (names checked)."""
    unknown = [k for k in overrides if k not in net.parts]
    if unknown:
        raise InputError(f"part(s) {', '.join(unknown)} not in a {net.kind} network "
                         f"(it has {', '.join(net.parts)})", source="--parts")
    return replace(net, parts={**net.parts, **overrides})
