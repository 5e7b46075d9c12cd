"""An op-amp stage designed in the 1/β picture: the :class:`StageDesign` result.

:func:`design_stage` takes the measured (or fitted) open-loop gain Aol of
op-amp + output stage + load and

1. places the feedback network for the phase-margin target
   (:mod:`benchfit.loop.stage_synthesis`; ``auto`` chooses the network);
2. snaps the parts: the gain pair Rf/Rg from the resistor series so the DC
   closed-loop gain is within 1 % (:func:`~benchfit.loop.stage_synthesis.snapped_gain_pairs`),
   every other part to its lower or upper series neighbour, keeping the set
   whose phase margin is nearest the target from above (:func:`pick_snapped`);
3. re-verifies the snapped loop T = Aol · compensator from the model (or the
   sweep) and checks the DC closed-loop gain with the finite Aol;
4. spreads it over part tolerances (:func:`benchfit.loop.tolerance.monte_carlo`);
5. reads the crossing once (:func:`crossing`): where |1/β_eff| = |Aol| with
   1/β_eff = Aol/T, the slopes there and the rate of closure.

The design's ``compensator`` is T/Aol (β(s) when Ro = 0), so T = plant · compensator
and PM = 180° + ∠T, as for the converter designs.
"""

from __future__ import annotations

import math
import os
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from benchfit.errors import DesignError, InputError
from benchfit.fileio import malformed_as_input_error, read_json, to_json_text, write_json_atomic
from benchfit.loop import eseries
from benchfit.loop.loopgain import LoopPlant
from benchfit.loop.margins import Margins
from benchfit.loop.prediction import Prediction, predict
from benchfit.loop.stage_choice import choose_network
from benchfit.loop.stage_crossing import crossing, worst_pm
from benchfit.loop.stage_load import StageLoad
from benchfit.loop.stage_networks import StageNetwork
from benchfit.loop.stage_response import closed_loop_values
from benchfit.loop.stage_synthesis import (GAIN_TOL, StageSynthesis, _margins, snapped_gain_pairs,
                                           stage_grid, synthesize_stage)
from benchfit.loop.synthesis import Targets
from benchfit.loop.tolerance import Spread, monte_carlo
from benchfit.provenance import Provenance

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


def dc_gain(lp: LoopPlant, net: StageNetwork) -> float:
    """Closed-loop gain at the bottom of the band with the finite Aol (signed)."""
    f = np.array([stage_grid(lp)[0]])
    return float(np.real(closed_loop_values(net, lp.response(f), f)["gain"][0]))


@dataclass(frozen=True, eq=False)
class StageDesign:
    """An op-amp stage's feedback network with ideal and snapped parts and their predictions."""

    stage: str
    kind: str
    gain: float
    ideal: Prediction
    snapped: Prediction
    plant: LoopPlant
    load: StageLoad
    targets: Targets
    series: dict[str, str]
    closed_loop_gain: dict[str, float]
    crossing: dict[str, Any]
    synthesis: StageSynthesis | None = None
    choice: tuple[str, ...] = ()
    spread: Spread | None = None
    warnings: tuple[str, ...] = ()
    provenance: Provenance = field(default_factory=lambda: Provenance(step="stage_design"))

    @property
    def network(self) -> StageNetwork:
        return self.snapped.network

    @property
    def targets_met(self) -> bool:
        m = self.snapped.corners[0]
        return bool(m.closed_loop_stable and self.targets.met(worst_pm(m), m.gain_margin_db)
                    and abs(self.closed_loop_gain["snapped"] / self.gain - 1) <= GAIN_TOL)

    def to_dict(self) -> dict[str, Any]:
        key = "loop_data" if self.plant.is_data else "loop_model"
        return {
            "kind": "stage_design", "stage": self.stage, "network": self.kind,
            "lag_at": self.snapped.network.lag_at,
            "closed_loop_gain": {"asked": self.gain, **self.closed_loop_gain},
            "components": {"ideal": dict(self.ideal.network.parts),
                           "snapped": dict(self.snapped.network.parts)},
            "compensator": {"ideal": self.ideal.compensator.to_dict(),
                            "snapped": self.snapped.compensator.to_dict()},
            "load": self.load.to_dict(), "plant": self.plant.plant.to_dict(),
            "plant_band_hz": list(self.plant.band_hz),
            key: {"ideal": self.ideal.loops[0].to_dict(), "snapped": self.snapped.loops[0].to_dict()},
            "predicted": {"ideal": self.ideal.corners[0].to_dict(),
                          "snapped": self.snapped.corners[0].to_dict()},
            "crossing": dict(self.crossing), "targets_met": self.targets_met,
            "targets": self.targets.to_dict(), "series": dict(self.series),
            "synthesis": None if self.synthesis is None else self.synthesis.to_dict(),
            "choice": list(self.choice),
            "spread": None if self.spread is None else self.spread.to_dict(),
            "warnings": list(self.warnings), "provenance": self.provenance.to_dict(),
        }

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> StageDesign:
        from benchfit.data.response import FrequencyResponse
        from benchfit.fitting.model import PlantModel

        if not isinstance(d, dict) or d.get("kind") != "stage_design":
            raise InputError("not a stage design file (expected \"kind\": \"stage_design\")")
        try:
            load = StageLoad.from_dict(d.get("load"))
            p = d["plant"]
            plant = FrequencyResponse.from_dict(p) if p.get("kind") == "frequency_response" \
                else PlantModel.from_dict(p)
            lp = LoopPlant(plant, name="Aol", band_hz=tuple(d["plant_band_hz"]))
            key = "loop_data" if "loop_data" in d else "loop_model"

            def pred(which: str) -> Prediction:
                net = StageNetwork(d["network"], d["components"][which], d["stage"], load,
                                   d.get("lag_at", "across"))
                lo = d[key][which]
                loop = FrequencyResponse.from_dict(lo) if key == "loop_data" else PlantModel.from_dict(lo)
                return Prediction(network=net, compensator=PlantModel.from_dict(d["compensator"][which]),
                                  corners=(Margins.from_dict(d["predicted"][which]),), loops=(loop,))

            cl = {k: float(v) for k, v in d["closed_loop_gain"].items() if k != "asked"}
            return cls(stage=d["stage"], kind=d["network"], gain=float(d["closed_loop_gain"]["asked"]),
                       ideal=pred("ideal"), snapped=pred("snapped"), plant=lp, load=load,
                       targets=Targets.from_dict(d.get("targets")), series=dict(d.get("series", {})),
                       closed_loop_gain=cl, crossing=dict(d["crossing"]),
                       synthesis=StageSynthesis.from_dict(d.get("synthesis")),
                       choice=tuple(d.get("choice", ())), spread=Spread.from_dict(d.get("spread")),
                       warnings=tuple(d.get("warnings", ())),
                       provenance=Provenance.from_dict(d.get("provenance")))
        except (KeyError, TypeError, ValueError) as e:
            raise InputError(f"stage design file is incomplete or malformed ({type(e).__name__}: {e})") from None

    def to_json(self, path: str | os.PathLike) -> None:
        write_json_atomic(path, self.to_dict())

    def to_json_text(self) -> str:
        return to_json_text(self.to_dict())

    @classmethod
    def from_json(cls, path: str | os.PathLike) -> StageDesign:
        with malformed_as_input_error(path, "stage design file"):
            return cls.from_dict(read_json(path))

    def report(self) -> str:
        """Plain text: parts, closed-loop gain, margins beside the rate of closure, spread, warnings."""
        sign = "" if self.stage == "noninverting" else "−"
        lines = [f"{self.stage} stage, {self.kind} network, closed-loop gain {sign}{abs(self.gain):g} asked"]
        if self.choice:
            lines += [f"  {r}" for r in self.choice]
        lines.append(f"{'part':6}{'ideal':>14}{'snapped':>12}")
        for n, v in self.ideal.network.parts.items():
            unit = "ohm" if n[0] == "R" else "F"
            lines.append(f"{n:6}{_eng(v, unit):>14}{_eng(self.snapped.network.parts[n], unit):>12}")
        lines.append(f"series: R {self.series.get('resistor')}, C {self.series.get('capacitor')}")
        cg = self.closed_loop_gain
        lines.append(f"DC closed-loop gain: ideal {cg['ideal']:.5g}, snapped {cg['snapped']:.5g} "
                     f"({(cg['snapped'] / self.gain - 1) * 100:+.2f} % of the asked {self.gain:g})"
                     + (f"; {cg['tolerance_low']:.4g}..{cg['tolerance_high']:.4g} over the resistor "
                        "tolerance" if "tolerance_low" in cg else ""))
        for label, p in (("ideal", self.ideal), ("snapped", self.snapped)):
            m = p.corners[0]
            lines.append(f"{label:8} PM {m.phase_margin_deg:6.1f}° at {m.crossover_hz:.4g} Hz, "
                         f"GM {m.gain_margin_db:.1f} dB" + ("" if m.closed_loop_stable else "  UNSTABLE")
                         + (f"; another gain crossing at {m.min_phase_margin_hz:.4g} Hz has PM "
                            f"{m.min_phase_margin_deg:.1f}°" if worst_pm(m) < m.phase_margin_deg - 0.05
                            else ""))
        c = self.crossing
        lines.append(f"1/β meets Aol at {c['freq_hz']:.4g} Hz ({c['aol_db']:.1f} dB): Aol "
                     f"{c['aol_slope_db_per_decade']:.0f}, 1/β {c['inv_beta_slope_db_per_decade']:.0f} "
                     f"dB/decade, rate of closure {c['rate_of_closure_db_per_decade']:.0f} dB/decade "
                     f"— {c['reading']}; the margins above are the exact figures")
        if self.synthesis is not None:
            lines += [f"note: {n}" for n in self.synthesis.notes]
        if self.spread is not None:
            lines.append(self.spread.report())
        lines += [f"warning: {w}" for w in self.warnings]
        return "\n".join(lines)


def _eng(v: float, unit: str) -> str:
    for mult, pre in ((1e6, "M"), (1e3, "k"), (1.0, ""), (1e-3, "m"), (1e-6, "u"), (1e-9, "n"),
                      (1e-12, "p")):
        if abs(v) >= mult * 0.9999:
            return f"{v / mult:.4g}{pre}{unit}"
    return f"{v:.3g}{unit}"


def design_stage(lp: LoopPlant, kind: str, targets: Targets, *, gain: float,
                 stage: str = "noninverting", load: StageLoad | None = None,
                 r_level: float = 10e3, lag_at: str = "across",
                 series: tuple[str, str] = ("E24", "E12"),
                 tolerances: tuple[float | None, float | None] = (None, None),
                 draws: int = 2000, seed: int | None = None,
                 sources: Sequence[str] = ()) -> StageDesign:
    """Synthesise, snap, re-verify and spread an op-amp stage's feedback network.

    Parameters
    ----------
    lp
        The measured or fitted Aol (sensing 1).
    kind
        A network of :data:`benchfit.loop.stage_networks.KINDS` or 'auto'.
    targets
        Phase and gain margin targets (the crossover follows from the network).
    gain
        Closed-loop gain asked (the inverting stage's may be given negative or positive).
    stage, load, r_level, lag_at
        Stage kind, output load (Ro, CL, ESR), Rg, the lag's place.
    series, tolerances, draws, seed, sources
        As for :func:`benchfit.loop.design.design`.
    """
    load = load or StageLoad()
    r_series, c_series = eseries._key(series[0]), eseries._key(series[1])
    choice: list[str] = []
    g_abs = abs(float(gain))
    if kind == "auto":
        syn, choice = choose_network(lp, targets, gain=g_abs, stage=stage, load=load,
                                     r_level=r_level, lag_at=lag_at)
    else:
        syn = synthesize_stage(kind, lp, targets, gain=g_abs, stage=stage, load=load,
                               r_level=r_level, lag_at=lag_at)
    snapped_net = snap_stage(syn, lp, targets, g_abs, r_series, c_series)
    ideal = predict([lp], syn.network, None)
    snapped = predict([lp], snapped_net, None)
    want = g_abs if stage == "noninverting" else -g_abs
    cg = {"ideal": dc_gain(lp, syn.network), "snapped": dc_gain(lp, snapped_net)}
    m = snapped.corners[0]
    warnings = [w for w in m.warnings] + snapped_net.practical_warnings("snapped")
    if abs(cg["snapped"] / want - 1) > GAIN_TOL:
        warnings.append(f"snapped DC closed-loop gain {cg['snapped']:.5g} is more than 1 % from the "
                        f"{want:g} asked; use a finer resistor series (--series E96:E12)")
    if not (m.closed_loop_stable and targets.met(worst_pm(m), m.gain_margin_db)):
        warnings.append(f"snapped parts: PM {worst_pm(m):.1f}°, GM {m.gain_margin_db:.1f} dB "
                        f"miss the targets ({targets.phase_margin_deg:g}°, {targets.gain_margin_db:g} dB)")
    rt = eseries.tolerance(r_series) if tolerances[0] is None else float(tolerances[0])
    ct = eseries.tolerance(c_series) if tolerances[1] is None else float(tolerances[1])
    spread = None
    if draws:
        spread = monte_carlo([lp], snapped_net, None, targets, r_tol=rt, c_tol=ct, draws=draws,
                             seed=seed, freq_hz=stage_grid(lp))
        if worst_pm(m) < m.phase_margin_deg - 1.0:
            warnings.append("the Monte Carlo judges the main crossover's phase margin; the "
                            f"crossing at {m.min_phase_margin_hz:.4g} Hz with less margin is not in "
                            "its yield")
        if spread.yield_fraction < 0.9:
            warnings.append(f"only {spread.yield_fraction * 100:.1f} % of {spread.draws} Monte Carlo "
                            f"draws meet the targets with R ±{rt * 100:g} %, C ±{ct * 100:g} %")
    if "Rg" in snapped_net.parts:  # worst case of the ideal gain over the resistor tolerance
        r = snapped_net.parts["Rf"] / snapped_net.parts["Rg"]
        lo, hi = r * (1 - rt) / (1 + rt), r * (1 + rt) / (1 - rt)
        span = (1 + lo, 1 + hi) if stage == "noninverting" else (-hi, -lo)
        cg["tolerance_low"], cg["tolerance_high"] = span
    settings = {"network": kind, "stage": stage, "gain": gain, "r_level": r_level, "lag_at": lag_at,
                "series": [r_series, c_series], "tolerances": [rt, ct], "draws": draws, "seed": seed,
                "targets": targets.to_dict(), "load": load.to_dict()}
    if not math.isfinite(m.crossover_hz):
        raise DesignError("the snapped stage has no gain crossover in the plant's band")
    return StageDesign(stage=stage, kind=syn.network.kind, gain=want, ideal=ideal, snapped=snapped,
                       plant=lp, load=load, targets=targets,
                       series={"resistor": r_series, "capacitor": c_series}, closed_loop_gain=cg,
                       crossing=crossing(lp, snapped_net, m.crossover_hz), synthesis=syn,
                       choice=tuple(choice), spread=spread,
                       warnings=tuple(w for w in dict.fromkeys(warnings) if w),
                       provenance=Provenance(step="stage_design", sources=tuple(sources),
                                             settings=settings,
                                             parents=(lp.plant.provenance.to_dict(),)))
