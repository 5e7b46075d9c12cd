"""An op-amp stage designed in the 1/β picture: the :class:`StageDesign` result.

:func:`design_stage` takes the measured (or fitted) open-loop gain Aol of
op-amp + output stage + load and

1. places the feedback network for the phase-margin target
   (:mod:`benchfit.loop.stage_synthesis`; ``auto`` chooses the network);
2. snaps the parts: the gain pair Rf/Rg from the resistor series so the DC
   closed-loop gain is within 1 % (:func:`~benchfit.loop.stage_synthesis.snapped_gain_pairs`),
   every other part to its lower or upper series neighbour, keeping the set
   whose phase margin is nearest the target from above
   (:func:`benchfit.loop.stage_snapping.pick_snapped`);
3. re-verifies the snapped loop T = Aol · compensator from the model (or the
   sweep) and checks the DC closed-loop gain with the finite Aol;
4. spreads it over part tolerances (:func:`stage_spread`: the feature grid and the one
   pass rule of the converter designs, so zero tolerance is the nominal loop);
5. reads the crossing once (:func:`crossing`): where |1/β_eff| = |Aol| with
   1/β_eff = Aol/T, the slopes there and the rate of closure.

The design's ``compensator`` is T/Aol (β(s) when Ro = 0), so T = plant · compensator
and PM = 180° + ∠T, as for the converter designs.
"""

from __future__ import annotations

import math
import os
from collections.abc import Sequence
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np

from benchfit.errors import DesignError, InputError
from benchfit.fileio import malformed_as_input_error, read_json, to_json_text, write_json_atomic
from benchfit.loop import eseries
from benchfit.loop.loopgain import LoopPlant
from benchfit.loop.margins import Margins
from benchfit.loop.passrules import margins_meet
from benchfit.loop.prediction import Prediction, predict, target_warnings
from benchfit.loop.stage_choice import choose_network
from benchfit.loop.stage_crossing import crossing, worst_pm
from benchfit.loop.stage_load import LoadEvidence, StageLoad, load_pole_evidence
from benchfit.loop.stage_networks import StageNetwork
from benchfit.loop.stage_response import closed_loop_values
from benchfit.loop.stage_snapping import snap_stage
from benchfit.loop.stage_synthesis import GAIN_TOL, StageSynthesis, stage_grid, synthesize_stage
from benchfit.loop.targets import Targets
from benchfit.loop.tolerance import Spread, monte_carlo
from benchfit.numfmt import eng
from benchfit.provenance import Provenance

#: Redesign rounds allowed to reach a minimum yield.
YIELD_ROUNDS = 6


def stage_spread(lp: LoopPlant, net: StageNetwork, targets: Targets, *, r_tol: float,
                 c_tol: float, draws: int, seed: int | None = None,
                 plant_uncertainty: bool = True) -> Spread:
    """Monte Carlo of a stage network, as the converter designs run it.

    Every draw is evaluated on :func:`benchfit.loop.featuregrid.feature_grid`
    (the plant's and the network's poles and zeros, clusters at lightly damped
    pairs, every nominal crossing exactly) and judged by
    :func:`benchfit.loop.passrules.draws_pass`, the rule the nominal verdict
    (:attr:`StageDesign.targets_met`) uses, so a draw equal to the nominal
    loop has the nominal margins and verdict.
    """
    return monte_carlo([lp], net, None, targets, r_tol=r_tol, c_tol=c_tol, draws=draws,
                       seed=seed, plant_uncertainty=plant_uncertainty)


def band_gain_error(lp: LoopPlant, net: StageNetwork, want: float,
                    band_hz: float) -> tuple[float, float]:
    """Largest | |G|/|want| − 1 | (magnitude) from the bottom of the band to ``band_hz``,
    and where it is."""
    f0 = stage_grid(lp)[0]
    if not (band_hz > f0):
        raise InputError(f"gain band {band_hz:g} Hz; expected a frequency above the plant's "
                         f"lowest, {eng(f0, 'Hz')}", source="--gain-band")
    f = np.logspace(np.log10(f0), np.log10(band_hz), 200)
    g = closed_loop_values(net, lp.response(f), f)["gain"]
    err = np.abs(np.abs(g) / abs(want) - 1.0)
    k = int(np.nanargmax(err))
    return float(err[k]), float(f[k])


def fitted_pole_sigma(lp: LoopPlant):
    """``rel_sigma(f_hz)``: the relative standard error of the fitted real pole nearest
    ``f_hz`` (from the fit's parameters), or None when the plant is not a fit."""
    from benchfit.fitting.result import FitResult

    fit = getattr(lp.draws, "__self__", None)  # LoopPlant.draws is the fit's draw_responses
    if not isinstance(fit, FitResult):
        return None
    known = [(abs(p.value), p.stderr / abs(p.value)) for p in fit.parameters
             if p.name.startswith("pole") and p.name.endswith("_hz") and p.value
             and p.stderr is not None and math.isfinite(p.stderr)]
    if not known:
        return None
    f = np.array([k[0] for k in known])
    return lambda f_hz: known[int(np.argmin(np.abs(np.log(f / f_hz))))][1]


def load_warning(lp: LoopPlant, net: StageNetwork, label: str = "snapped") -> tuple[LoadEvidence | None, str | None]:
    """The stated load checked against the measured Aol (:func:`load_pole_evidence`),
    and the warning when they disagree; when the data name the load's CL the warning
    also gives the network's smallest phase margin with that CL (the Aol stays the
    measured one), so its effect on this network is in the numbers."""
    if lp.is_data:
        return None, None
    ev = load_pole_evidence(lp.plant, net.load, lp.band_hz, fitted_pole_sigma(lp))
    msg = ev.message(net.load) if ev is not None else None
    if msg and ev.data_cap_f is not None:
        other = replace(net, load=replace(net.load, c_f=ev.data_cap_f))
        pm_data = worst_pm(predict([lp], other, None).corners[0])
        pm_said = worst_pm(predict([lp], net, None).corners[0])
        msg += (f"; with CL = {eng(ev.data_cap_f, 'F')} the {label} network's smallest phase margin "
                f"would be {pm_data:.1f}° (designed {pm_said:.1f}° with the stated load)")
    return ev, msg


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
        """Snapped parts meet every margin target (every crossing, no slack:
        :func:`benchfit.loop.passrules.margins_meet`, the rule of the Monte Carlo yield)
        and the DC closed-loop gain is within 1 %."""
        m = self.snapped.corners[0]
        return bool(margins_meet(m, self.targets)
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
        from benchfit.numfmt import db, db_per_decade, deg, sig

        sign = "" if self.stage == "noninverting" else "−"
        lines = [f"{self.stage} stage, {self.kind} network, closed-loop gain {sign}{sig(abs(self.gain))} asked"]
        if self.choice:
            lines += [f"  {r}" for r in self.choice]
        lines.append(f"{'part':6}{'ideal':>14}{'snapped':>12}")
        for n, v in self.ideal.network.parts.items():
            unit = "ohm" if n[0] == "R" else "F"
            lines.append(f"{n:6}{eng(v, unit, 4):>14}{eng(self.snapped.network.parts[n], unit):>12}")
        lines.append(f"series: R {self.series.get('resistor')}, C {self.series.get('capacitor')}")
        cg = self.closed_loop_gain
        lines.append(f"DC closed-loop gain: ideal {sig(cg['ideal'], 5)}, snapped {sig(cg['snapped'], 5)} "
                     f"({(cg['snapped'] / self.gain - 1) * 100:+.2f} % of the asked {sig(self.gain)})"
                     + (f"; {sig(cg['tolerance_low'], 4)} to {sig(cg['tolerance_high'], 4)} over the "
                        "resistor tolerance" if "tolerance_low" in cg else ""))
        if "band_hz" in cg:
            lines.append(f"closed-loop gain within {cg['band_error'] * 100:.2f} % of the asked one "
                         f"up to {eng(cg['band_hz'], 'Hz')}")
        for label, p in (("ideal", self.ideal), ("snapped", self.snapped)):
            m = p.corners[0]
            lines.append(f"{label:8} PM {deg(m.phase_margin_deg)} at {eng(m.crossover_hz, 'Hz')}, "
                         f"{m.gain_margin_line()}" + ("" if m.closed_loop_stable else "  UNSTABLE")
                         + (f"; another gain crossing at {eng(m.min_phase_margin_hz, 'Hz')} has PM "
                            f"{deg(m.min_phase_margin_deg)}" if worst_pm(m) < m.phase_margin_deg - 0.05
                            else ""))
        c = self.crossing
        lines.append(f"1/β meets Aol at {eng(c['freq_hz'], 'Hz')} ({db(c['aol_db'])}): Aol "
                     f"{db_per_decade(c['aol_slope_db_per_decade'])}, 1/β "
                     f"{db_per_decade(c['inv_beta_slope_db_per_decade'])}, rate of closure "
                     f"{db_per_decade(c['rate_of_closure_db_per_decade'])} — {c['reading']}; "
                     "the margins above are the exact figures")
        aim = self.provenance.settings.get("designed_for") or {}
        if aim and aim.get("phase_margin_deg") != self.targets.phase_margin_deg:
            lines.append(f"placed for PM {deg(aim['phase_margin_deg'])} so that "
                         f"{(self.provenance.settings.get('min_yield') or 0) * 100:g} % of the draws "
                         f"keep {deg(self.targets.phase_margin_deg)}")
        if self.synthesis is not None:
            lines += [f"note: {n}" for n in self.synthesis.notes]
        if self.spread is not None:
            lines.append(self.spread.report())
        lines += [f"warning: {w}" for w in self.warnings]
        return "\n".join(lines)


def design_stage(lp: LoopPlant, kind: str, targets: Targets, *, gain: float,
                 stage: str = "noninverting", load: StageLoad | None = None,
                 r_level: float = 10e3, lag_at: str = "across",
                 series: tuple[str, str] = ("E24", "E12"),
                 tolerances: tuple[float | None, float | None] = (None, None),
                 draws: int = 2000, seed: int | None = None,
                 sources: Sequence[str] = (), gain_band_hz: float | None = None,
                 min_yield: float | None = None) -> StageDesign:
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
    gain_band_hz
        When given, the snapped closed-loop gain must also stay within 1 % of
        the asked one from the bottom of the band up to this frequency
        (checked with the finite Aol; a warning otherwise).
    min_yield
        Fraction of Monte Carlo draws that must meet the targets: the network is
        placed for more phase margin, by the shortfall of the draws' p5 (p1 above
        95 %), until they do (a few rounds at most).  The targets reported stay
        the ones asked.
    """
    load = load or StageLoad()
    r_series, c_series = eseries._key(series[0]), eseries._key(series[1])
    if min_yield is not None and not (0.0 < min_yield < 1.0 and draws):
        raise InputError(f"minimum yield {min_yield!r}; expected a fraction between 0 and 1 and "
                         "Monte Carlo draws (--draws above 0)", source="--min-yield")
    rt = eseries.tolerance(r_series) if tolerances[0] is None else float(tolerances[0])
    ct = eseries.tolerance(c_series) if tolerances[1] is None else float(tolerances[1])
    g_abs = abs(float(gain))
    aim, spread, got = targets, None, None
    for _ in range(YIELD_ROUNDS):
        try:
            if kind == "auto":
                syn, choice = choose_network(lp, aim, gain=g_abs, stage=stage, load=load,
                                             r_level=r_level, lag_at=lag_at)
            else:
                syn, choice = synthesize_stage(kind, lp, aim, gain=g_abs, stage=stage, load=load,
                                               r_level=r_level, lag_at=lag_at), []
        except DesignError:
            if got is None:
                raise
            break  # more margin than the plant allows: keep the last design
        snapped_net = snap_stage(syn, lp, aim, g_abs, r_series, c_series)
        got = (syn, choice, snapped_net, aim)
        spread = None if not draws else stage_spread(lp, snapped_net, targets, r_tol=rt,
                                                     c_tol=ct, draws=draws, seed=seed)
        if min_yield is None or spread.yield_fraction >= min_yield:
            break
        q = "p1" if min_yield > 0.95 else "p5"
        short = targets.phase_margin_deg - spread.percentiles["pm_deg"][q]
        aim = replace(aim, phase_margin_deg=min(aim.phase_margin_deg + max(short, 0.0) + 0.5, 89.0))
    syn, choice, snapped_net, used = got
    spread = spread if draws else None
    ideal = predict([lp], syn.network, None)
    snapped = predict([lp], snapped_net, None)
    want = g_abs if stage == "noninverting" else -g_abs
    cg = {"ideal": dc_gain(lp, syn.network), "snapped": dc_gain(lp, snapped_net)}
    m = snapped.corners[0]
    warnings = [w for w in m.warnings] + snapped_net.practical_warnings("snapped")
    if gain_band_hz is not None:
        err, f_at = band_gain_error(lp, snapped_net, want, gain_band_hz)
        cg["band_hz"], cg["band_error"] = float(gain_band_hz), err
        if err > GAIN_TOL:
            warnings.append(f"the closed-loop gain's magnitude is {err * 100:.2f} % off the asked {want:g} at "
                            f"{eng(f_at, 'Hz')}, inside the {eng(gain_band_hz, 'Hz')} band asked "
                            "(--gain-band); the loop gain there is too low")
    if abs(cg["snapped"] / want - 1) > GAIN_TOL:
        warnings.append(f"snapped DC closed-loop gain {cg['snapped']:.5g} is more than 1 % from the "
                        f"{want:g} asked; use a finer resistor series (--series E96:E12)")
    warnings += target_warnings(snapped, targets, ["Aol"], "snapped")
    load_ev, load_msg = load_warning(lp, snapped_net)
    if load_msg:
        warnings.append(load_msg)
    if spread is not None:
        if min_yield is not None and spread.yield_fraction < min_yield:
            warnings.append(f"the {min_yield * 100:g} % yield asked for was not reached: "
                            f"{spread.yield_fraction * 100:.1f} % when designed for PM "
                            f"{used.phase_margin_deg:.1f}°")
        elif spread.yield_fraction < 0.9:
            warnings.append(f"only {spread.yield_fraction * 100:.1f} % of {spread.draws} Monte Carlo "
                            f"draws meet the targets with R ±{rt * 100:g} %, C ±{ct * 100:g} %")
    if "Rg" in snapped_net.parts:  # worst case of the ideal gain over the resistor tolerance
        r = snapped_net.parts["Rf"] / snapped_net.parts["Rg"]
        lo, hi = r * (1 - rt) / (1 + rt), r * (1 + rt) / (1 - rt)
        span = (1 + lo, 1 + hi) if stage == "noninverting" else (-hi, -lo)
        cg["tolerance_low"], cg["tolerance_high"] = span
    settings = {"network": kind, "stage": stage, "gain": gain, "r_level": r_level, "lag_at": lag_at,
                "series": [r_series, c_series], "tolerances": [rt, ct], "draws": draws, "seed": seed,
                "targets": targets.to_dict(), "load": load.to_dict(), "min_yield": min_yield,
                "designed_for": used.to_dict(),
                "load_check": None if load_ev is None else load_ev.to_dict()}
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
