"""Op-amp compensation networks as part values, with an ideal or finite op-amp.

Every network is an inverting op-amp stage: input impedance Zi from the
sensed output to the inverting input, feedback impedance Zf from there to
the amplifier output, reference on the non-inverting input.

======  ===========================  ==========================================
kind    Zi                           Zf
======  ===========================  ==========================================
type1   R1                           C1                       (integrator)
type2   R1                           (R2 + C1) ‖ C2           (lag-lead)
type3   R1 ‖ (R3 + C3)               (R2 + C1) ‖ C2
pi      R1                           R2 + C1     (PI; gain floor R2/R1 at high f)
======  ===========================  ==========================================

Stage gain with an op-amp of open-loop gain A(s) (V+ = 0, V− by
superposition)::

    Vout/Vin = −(Zf/Zi) · 1 / (1 + (1 + Zf/Zi)/A)

**Sign convention.** In a regulator the error amplifier's inversion *is*
the loop's negative-feedback sign.  The return ratio (cut the loop, inject,
measure what comes back with the sign flipped) of plant · sensing ·
(−Zf/Zi …) is therefore plant · sensing · (+Zf/Zi …).  So the compensator
this module returns is the stage gain **without** the leading minus sign:

    C(s) = (Zf/Zi) / (1 + (1 + Zf/Zi)/A)

and ``T = plant · sensing · C`` is the return ratio, with phase margin
``PM = 180° + ∠T`` at the crossover.  Multiplying the three responses
reproduces T exactly.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from benchfit.errors import InputError
from benchfit.fitting.model import PlantModel
from benchfit.loop.opamp import OpAmp
from benchfit.loop.rational import POLY, VALUES, Algebra, Frac, frac_to_zpk
from benchfit.provenance import Provenance

#: Practical part ranges (common practice, no source): R in ohm, C in F.
R_MIN, R_MAX, C_MIN = 100.0, 10e6, 10e-12

#: Part names of each network kind (R… in ohm, C… in F).
PARTS: dict[str, tuple[str, ...]] = {
    "type1": ("R1", "C1"),
    "type2": ("R1", "R2", "C1", "C2"),
    "type3": ("R1", "R2", "R3", "C1", "C2", "C3"),
    "pi": ("R1", "R2", "C1"),
}


#: What a person reads for each kind (the JSON keeps the short keys above).
LABELS: dict[str, str] = {"type1": "Type I", "type2": "Type II", "type3": "Type III", "pi": "PI"}


def network_label(kind: str) -> str:
    """'Type III' for 'type3': the name every human view uses for a network kind."""
    return LABELS.get(kind, str(kind))


def check_kind(kind: str, source: str = "network") -> str:
    """Normalise a network name ('Type II', 'type2', '2' …) or raise InputError."""
    k = str(kind).strip().lower().replace(" ", "").replace("-", "").replace("_", "")
    aliases = {"1": "type1", "typei": "type1", "integrator": "type1",
               "2": "type2", "typeii": "type2", "3": "type3", "typeiii": "type3"}
    k = aliases.get(k, k)
    if k not in PARTS:
        raise InputError(f"network {kind!r} unknown; expected one of {', '.join(PARTS)}", source=source)
    return k


@dataclass(frozen=True, eq=False)
class Network:
    """A compensation network: its kind and part values.

    Parameters
    ----------
    kind
        One of :data:`PARTS` ('type1', 'type2', 'type3', 'pi').
    parts
        Part values by name: resistors in ohm, capacitors in F.
    """

    kind: str
    parts: dict[str, float]

    def __post_init__(self) -> None:
        kind = check_kind(self.kind)
        names = PARTS[kind]
        missing = [n for n in names if n not in self.parts]
        extra = [n for n in self.parts if n not in names]
        if missing or extra:
            raise InputError(f"{kind} network needs parts {', '.join(names)}; "
                             f"missing {missing or 'none'}, unknown {extra or 'none'}", source="parts")
        clean = {}
        for n in names:
            v = float(self.parts[n])
            if not (math.isfinite(v) and v > 0):
                raise InputError(f"part {n} = {self.parts[n]!r}; expected a finite value > 0",
                                 source="parts")
            clean[n] = v
        object.__setattr__(self, "kind", kind)
        object.__setattr__(self, "parts", clean)

    # ----- structure ----------------------------------------------------------------
    def impedances(self, alg: Algebra, values: dict[str, Any] | None = None) -> tuple[Frac, Frac]:
        """(Zi, Zf) in the algebra; ``values`` overrides part values (arrays allowed)."""
        v = dict(self.parts)
        if values:
            v.update(values)
        r, c = alg.resistor, alg.capacitor
        if self.kind == "type1":
            return r(v["R1"]), c(v["C1"])
        if self.kind == "pi":
            return r(v["R1"]), alg.series(r(v["R2"]), c(v["C1"]))
        zf = alg.parallel(alg.series(r(v["R2"]), c(v["C1"])), c(v["C2"]))
        if self.kind == "type2":
            return r(v["R1"]), zf
        zi = alg.parallel(r(v["R1"]), alg.series(r(v["R3"]), c(v["C3"])))
        return zi, zf

    def stage(self, alg: Algebra, opamp: OpAmp | None = None,
              values: dict[str, Any] | None = None) -> Frac:
        """Compensator C = (Zf/Zi)/(1 + (1 + Zf/Zi)/A) (inversion folded into the loop sign)."""
        zi, zf = self.impedances(alg, values)
        g = zf / zi
        if opamp is None:
            return g
        a = opamp.gain(alg)
        b = alg.backend
        if b is VALUES:  # sampled values: the formula as written
            gv = g.value()
            return Frac(gv / (1.0 + (1.0 + gv) / a.value()), None, b)
        # N/D = Zf/Zi, A = na/da  ->  C = N·na / (D·na + (D + N)·da): no common factors.
        num = b.mul(g.num, a.num)
        den = b.add(b.mul(g.den, a.num), b.mul(b.add(g.den, g.num), a.den))
        return Frac(num, den, b)

    # ----- evaluation ---------------------------------------------------------------
    def response(self, freq_hz: np.ndarray, opamp: OpAmp | None = None,
                 values: dict[str, Any] | None = None) -> np.ndarray:
        """Complex C(j2πf), vectorised.

        ``values`` may hold arrays of shape (n, 1) per part (Monte Carlo draws);
        the result then has shape (n, len(freq_hz)).
        """
        s = 2j * np.pi * np.asarray(freq_hz, dtype=float)
        return self.stage(Algebra(VALUES, s=s), opamp, values).value()

    def model(self, opamp: OpAmp | None = None) -> PlantModel:
        """Pole/zero model of C (rad/s), ideal op-amp when ``opamp`` is None."""
        w0 = 1.0 / (self.parts["R1"] * self.parts["C1"])
        zeros, poles, k = frac_to_zpk(self.stage(Algebra(POLY, w0=w0), opamp), w0)
        # roots of a polynomial with an exact zero constant term come out exactly 0
        return PlantModel(zeros=zeros, poles=poles, k=k,
                          provenance=Provenance(step="network", settings=self.to_dict() | {
                              "opamp": None if opamp is None else opamp.to_dict()}))

    # ----- descriptive views --------------------------------------------------------
    def corners_hz(self) -> dict[str, list[float]]:
        """Ideal-op-amp zero and pole frequencies in Hz (origin pole not listed)."""
        m = self.model(None)
        z = sorted(float(abs(x)) / (2 * np.pi) for x in m.zeros)
        p = sorted(float(abs(x)) / (2 * np.pi) for x in m.poles if abs(x) > 0)
        return {"zeros_hz": z, "poles_hz": p}

    def integrator_hz(self) -> float:
        """Frequency where the ideal integrator part ωi/s has unity gain, in Hz."""
        v = self.parts
        if self.kind in ("type1", "pi"):
            ctot = v["C1"]
        else:
            ctot = v["C1"] + v["C2"]
        return 1.0 / (2 * np.pi * v["R1"] * ctot)

    def centre_hz(self) -> float | None:
        """Geometric mean of the zero and pole frequencies (None for type1)."""
        c = self.corners_hz()
        f = c["zeros_hz"] + c["poles_hz"]
        return float(np.exp(np.mean(np.log(f)))) if f else None

    def midband_gain(self) -> float:
        """|C| at :meth:`centre_hz` with an ideal op-amp (type1: |C| = 1 at
        :meth:`integrator_hz`, so 1.0).  For pi this tends to the floor R2/R1."""
        fc = self.centre_hz()
        if fc is None:
            return 1.0
        return float(abs(self.response(np.array([fc]))[0]))

    def practical_warnings(self, label: str = "") -> list[str]:
        """Parts outside the practical range (R 100 Ω..10 MΩ, C >= 10 pF; common practice)."""
        out = []
        pre = f"{label} " if label else ""
        for n, v in self.parts.items():
            if n[0] == "R" and not (R_MIN <= v <= R_MAX):
                out.append(f"{pre}{n} = {v:.4g} ohm is outside the practical 100 ohm..10 Mohm "
                           "range; change --r-in or the crossover")
            elif n[0] == "C" and v < C_MIN:
                out.append(f"{pre}{n} = {v:.4g} F is below 10 pF (board and op-amp input "
                           "capacitance will swamp it); lower --r-in or the crossover")
        return out

    def to_dict(self) -> dict[str, Any]:
        return {"kind": self.kind, "parts": dict(self.parts)}

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> Network:
        if not isinstance(d, dict) or "kind" not in d or "parts" not in d:
            raise InputError("expected a network object with 'kind' and 'parts'")
        return cls(kind=d["kind"], parts=dict(d["parts"]))
