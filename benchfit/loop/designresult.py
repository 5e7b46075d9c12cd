"""The :class:`Design` result: ideal and snapped parts, their predictions, spread, JSON and text."""

from __future__ import annotations

import os
from dataclasses import dataclass, field
from typing import Any

from benchfit import numfmt
from benchfit.data.response import FrequencyResponse
from benchfit.errors import InputError
from benchfit.fileio import malformed_as_input_error, read_json, to_json_text, write_json_atomic
from benchfit.fitting.model import PlantModel
from benchfit.loop.loopgain import LoopPlant
from benchfit.loop.marginsresult import Margins
from benchfit.loop.networks import Network, check_kind, network_label
from benchfit.loop.opamp import OpAmp
from benchfit.loop.passrules import check_crossings
from benchfit.loop.prediction import Prediction, target_warnings
from benchfit.loop.sensing import Sensing
from benchfit.loop.targets import Synthesis, Targets
from benchfit.loop.tolerance import Spread
from benchfit.provenance import Provenance


def _plant_dict(lp: LoopPlant) -> dict[str, Any]:
    return {"name": lp.name, "band_hz": list(lp.band_hz), "plant": lp.plant.to_dict()}


def _plant_from_dict(d: dict[str, Any], sensing: Sensing) -> LoopPlant:
    p = d["plant"]
    plant = FrequencyResponse.from_dict(p) if p.get("kind") == "frequency_response" \
        else PlantModel.from_dict(p)
    return LoopPlant(plant, sensing, name=str(d.get("name", "plant")),
                     band_hz=tuple(d["band_hz"]) if d.get("band_hz") else None)


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
        """True when the snapped parts meet every target on every corner (every counted
        crossing, no slack: :func:`benchfit.loop.passrules.margins_meet`)."""
        return not target_warnings(self.snapped, self.targets, self.corner_names, "snapped",
                                   self.crossings)

    @property
    def crossings(self) -> str | tuple[float, float]:
        """Which crossings count towards the targets (the design's setting, "all" by default)."""
        return check_crossings(self.provenance.settings.get("crossings", "all"))

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
        if isinstance(d, dict) and d.get("kind") == "stage_design":
            raise InputError("a stage design (op-amp stage, 1/β crossing), not a compensator design: "
                             "`benchfit predict`, `report` and `margins` read it; `check` takes a "
                             "compensator design (\"kind\": \"design\")")
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
            gm = m.gain_margin_line()
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
