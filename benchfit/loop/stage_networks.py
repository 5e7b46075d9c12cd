"""Feedback networks of an op-amp stage driving a capacitive load, from part values.

The stage (non-inverting or inverting) is an op-amp whose internal gain
``A(s)`` drives an output resistance Ro into the op-amp's output pin; the
load (capacitor CL with its ESR) hangs on the load node.  The plant is the
measured open-loop gain with that load, ``Aol = A · ZL/(Ro + ZL)``.  The
networks (schematics in docs/design.md)::

    kind        parts                 where
    plain       Rf, Rg                Rf load->V-, Rg V- -> ground (inverting: V- -> input)
    lead        Rf, Rg, Cf            Cf across Rf
    lag         Rf, Rg, Rn, Cn        Rn + Cn in series from V- to ground, or across the inputs
    lag-lead    Rf, Rg, Cf, Rn, Cn    both
    isolation   Rf, Rg, Cf, Riso      Riso from the op-amp pin to the load, Rf from the load,
                                      Cf from the op-amp pin to V- (dual feedback)
    snubber     Rf, Rg, Rs, Cs        Rs + Cs in series from the load node to ground

For a unity-gain follower Rg may be left out (open).

Every transfer function is solved from the node equations of the circuit
(Kirchhoff's current law at the op-amp pin, the load node and V-, written
with the parts' admittances) by Cramer's rule, in either backend of
:mod:`benchfit.loop.rational`: exact polynomials (the pole/zero model) or
sampled values (vectorised over Monte Carlo draws).  With the op-amp's
internal source at V_x and the signal input at V_i:

* ``h_x = V-/V_x`` (V_i = 0) — the return ratio is ``T = A · h_x``;
* the **compensator** is ``T / Aol = h_x · (1 + Ro/ZL)``, so ``T = plant ·
  compensator`` with plant = the measured Aol.  With Ro = 0 (or no load
  given) it is exactly the feedback factor β(s) = V-/V_out;
* closed loop ``G = k_x · A · (p − h_in)/(1 + T) + k_in`` with ``p`` = 1 for
  the non-inverting stage (V+ = V_i), 0 for the inverting one, ``h_in = V-/V_i``
  and ``k_x, k_in`` the load node's responses to V_x and V_i.

Sign: the non-inverting stage's V- is the fed-back signal, subtracted at the
op-amp input, so ``T = A·h_x`` is the return ratio with PM = 180° + ∠T, the
same convention as :mod:`benchfit.loop.networks`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from benchfit.errors import InputError
from benchfit.fitting.model import PlantModel
from benchfit.loop.nodal import Ring, cancel_pair, trim
from benchfit.loop.rational import POLY, VALUES, Algebra, Frac
from benchfit.loop.stage_load import StageLoad
from benchfit.numfmt import eng
from benchfit.provenance import Provenance

STAGES = ("noninverting", "inverting")
#: Part names of each network (the order is the report's order).
PARTS: dict[str, tuple[str, ...]] = {
    "plain": ("Rf", "Rg"),
    "lead": ("Rf", "Rg", "Cf"),
    "lag": ("Rf", "Rg", "Rn", "Cn"),
    "lag-lead": ("Rf", "Rg", "Cf", "Rn", "Cn"),
    "isolation": ("Rf", "Rg", "Cf", "Riso"),
    "snubber": ("Rf", "Rg", "Rs", "Cs"),
}
KINDS = tuple(PARTS)
LAG_PLACES = ("across", "ground")


def check_stage_kind(kind: str, source: str = "--network") -> str:
    """Normalise a stage network name ('lag-lead', 'lag_lead', 'laglead' …) or raise InputError."""
    k = str(kind).strip().lower().replace("_", "-").replace(" ", "-")
    k = {"laglead": "lag-lead", "iso": "isolation", "dual": "isolation", "none": "plain"}.get(k, k)
    if k not in PARTS:
        raise InputError(f"stage network {kind!r} unknown; expected one of {', '.join(KINDS)} or auto",
                         source=source)
    return k


def check_stage(stage: str, source: str = "--stage") -> str:
    s = str(stage).strip().lower().replace("-", "").replace("_", "")
    s = {"noninv": "noninverting", "inv": "inverting"}.get(s, s)
    if s not in STAGES:
        raise InputError(f"stage {stage!r} unknown; expected noninverting or inverting", source=source)
    return s


@dataclass(frozen=True, eq=False)
class StageNetwork:
    """The parts of one stage network, its stage and its load.

    Parameters
    ----------
    kind
        One of :data:`KINDS`.
    parts
        Part values by name (ohm, F); Rg may be absent for a follower.
    stage
        'noninverting' or 'inverting'.
    load
        Ro, CL, ESR of the output (needed by isolation and snubber).
    lag_at
        Where the lag R–C sits: 'across' the inputs (non-inverting default: the
        ideal signal gain is untouched) or 'ground' (V- to ground: the signal
        gain rises to the noise gain at high frequency).  In an inverting stage
        V+ is at ground, so both places are the same node and the network
        records 'ground', the place it builds.
    """

    kind: str
    parts: dict[str, float]
    stage: str = "noninverting"
    load: StageLoad = field(default_factory=StageLoad)
    lag_at: str = "across"

    def __post_init__(self) -> None:
        kind = check_stage_kind(self.kind, "network")
        stage = check_stage(self.stage, "stage")
        need = [n for n in PARTS[kind] if not (n == "Rg" and stage == "noninverting")]
        missing = [n for n in need if n not in self.parts]
        extra = [n for n in self.parts if n not in PARTS[kind]]
        if missing or extra:
            raise InputError(f"{kind} stage network needs parts {', '.join(PARTS[kind])}; missing "
                             f"{missing or 'none'}, unknown {extra or 'none'}", source="parts")
        clean = {}
        for n in PARTS[kind]:
            if n in self.parts:
                v = float(self.parts[n])
                if not (math.isfinite(v) and v > 0):
                    raise InputError(f"part {n} = {self.parts[n]!r}; expected a finite value > 0",
                                     source="parts")
                clean[n] = v
        if self.lag_at not in LAG_PLACES:
            raise InputError(f"lag place {self.lag_at!r}; expected across or ground", source="--lag-at")
        if kind in ("isolation", "snubber") and not self.load.known:
            raise InputError(f"the {kind} network changes the load, so it needs the op-amp's output "
                             "resistance and the load capacitor; give --output-resistance and "
                             "--load-cap", source="--network")
        object.__setattr__(self, "kind", kind)
        object.__setattr__(self, "stage", stage)
        object.__setattr__(self, "parts", clean)
        if stage == "inverting":  # V+ is grounded: 'across the inputs' is V- to ground
            object.__setattr__(self, "lag_at", "ground")

    # ----- the circuit ---------------------------------------------------------------
    def _branches(self, alg: Algebra, v: dict[str, Any]) -> list[tuple[str, str, tuple]]:
        """(node, node, admittance as (num, den)) of every part; nodes x o l n i and 0."""
        b = alg.backend
        one = np.array([1.0]) if b is POLY else 1.0
        s = np.array([alg.w0, 0.0]) if b is POLY else alg.s

        def const(g):
            return (np.array([float(g)]) if b is POLY else g), one

        def cap(c):  # sC
            return (s * float(c) if b is POLY else s * c), one

        def series_rc(r, c):  # sC / (1 + sRC)
            num = cap(c)[0]
            return num, b.add(one, b.mul(num, np.array([float(r)]) if b is POLY else r))

        ld = self.load
        out: list[tuple[str, str, tuple]] = []
        if ld.ro_ohm > 0:
            out.append(("x", "o", const(1.0 / ld.ro_ohm)))
        if ld.c_f is not None and ld.ro_ohm > 0:
            out.append(("l", "0", series_rc(ld.esr_ohm, ld.c_f) if ld.esr_ohm > 0 else cap(ld.c_f)))
        out.append(("l", "n", const(1.0 / v["Rf"])))
        g_end = "0" if self.stage == "noninverting" else "i"
        if "Rg" in v:
            out.append(("n", g_end, const(1.0 / v["Rg"])))
        if self.kind == "isolation":
            out.append(("o", "l", const(1.0 / v["Riso"])))
            out.append(("o", "n", cap(v["Cf"])))
        if self.kind in ("lead", "lag-lead"):
            out.append(("l", "n", cap(v["Cf"])))
        if self.kind in ("lag", "lag-lead"):
            end = "i" if (self.lag_at == "across" and self.stage == "noninverting") else "0"
            out.append(("n", end, series_rc(v["Rn"], v["Cn"])))
        if self.kind == "snubber":
            out.append(("l", "0", series_rc(v["Rs"], v["Cs"])))
        return out

    def _solve(self, alg: Algebra, values: dict[str, Any] | None, drive: dict[str, Any],
               want: str, grounded: tuple[str, ...] = (), inject: str | None = None):
        """(num, den) of V_want for the given node drives (x, i: 1 or 0) by Cramer's rule.

        ``inject`` drives a 1 A current into that node instead (all sources 0).
        """
        ring = Ring(alg.backend)
        v = dict(self.parts)
        if values:
            v.update(values)
        alias = {}
        if self.load.ro_ohm <= 0:
            alias["o"] = "x"
        if self.kind != "isolation":
            alias["l"] = alias.get("o", "o")
        for g in grounded:
            alias[g] = "0"

        def node(n):
            while n in alias:
                n = alias[n]
            return n

        br = [(node(a), node(c), y) for a, c, y in self._branches(alg, v)]
        br = [x for x in br if x[0] != x[1]]
        driven = {"x": drive.get("x", 0.0), "i": drive.get("i", 0.0), "0": 0.0}
        unknown = [n for n in ("o", "l", "n") if node(n) == n and n not in driven]
        if node(want) in driven:
            val = driven[node(want)]
            return ring.mul(np.array([float(val)]) if alg.backend is POLY else val,
                            np.array([1.0]) if alg.backend is POLY else 1.0), \
                np.array([1.0]) if alg.backend is POLY else 1.0
        zero = np.array([0.0]) if alg.backend is POLY else 0.0
        rows, rhs = [], []
        for r in unknown:
            inc = [(a if c == r else c, y) for a, c, y in br if r in (a, c)]
            den = None
            for _, y in inc:  # one common denominator per row: product of distinct ones
                if den is None:
                    den = y[1]
                elif y[1] is not den and not (alg.backend is POLY and np.array_equal(y[1], [1.0])):
                    den = ring.mul(den, y[1])
            den = den if den is not None else (np.array([1.0]) if alg.backend is POLY else 1.0)
            row = {n: zero for n in unknown}
            b_r = zero
            for other, (yn, yd) in inc:
                scaled = self._scale(ring, alg, yn, yd, den)
                row[r] = ring.add(row[r], scaled)
                if other in unknown:
                    row[other] = ring.add(row[other], ring.neg(scaled))
                elif driven.get(other, 0.0):
                    b_r = ring.add(b_r, ring.mul(scaled, np.array([float(driven[other])])
                                                 if alg.backend is POLY else driven[other]))
            if inject is not None and node(inject) == r:
                b_r = ring.add(b_r, den)
            rows.append([row[n] for n in unknown])
            rhs.append(b_r)
        k = unknown.index(node(want))
        num_m = [row[:k] + [rhs[i]] + row[k + 1:] for i, row in enumerate(rows)]
        return ring.det(num_m), ring.det(rows)

    @staticmethod
    def _scale(ring, alg, yn, yd, den):
        """yn/yd · den, exactly (den is a product that contains yd)."""
        if alg.backend is VALUES:
            return yn * den / yd
        if np.array_equal(yd, [1.0]):
            return ring.mul(yn, den)
        q, r = np.polydiv(den, yd)
        if np.max(np.abs(r), initial=0.0) > 1e-9 * np.max(np.abs(den)):
            raise AssertionError("row denominator does not contain the branch's")  # pragma: no cover
        return ring.mul(yn, q)

    # ----- transfer functions ----------------------------------------------------------
    def _frac(self, alg, numden) -> Frac:
        n, d = numden
        if alg.backend is VALUES:
            return Frac(n / d, None, VALUES)
        return Frac(np.atleast_1d(n), np.atleast_1d(d), POLY)

    def loop_factor(self, alg: Algebra, values: dict[str, Any] | None = None) -> Frac:
        """h_x = V-/V_x with the signal input at 0: T = A·h_x."""
        return self._frac(alg, self._solve(alg, values, {"x": 1.0}, "n"))

    def aol_divider(self, alg: Algebra) -> Frac:
        """ZL/(Ro + ZL): the measured Aol's share of the output divider (1 with no load known)."""
        ld = self.load
        if not (ld.ro_ohm > 0 and ld.c_f is not None):
            return alg.const(1.0)
        z = alg.series(alg.resistor(ld.esr_ohm), alg.capacitor(ld.c_f)) if ld.esr_ohm > 0 \
            else alg.capacitor(ld.c_f)
        return z / alg.series(alg.resistor(ld.ro_ohm), z)

    def compensator(self, alg: Algebra, values: dict[str, Any] | None = None) -> Frac:
        """T / Aol = h_x · (Ro + ZL)/ZL (β(s) itself when Ro = 0), sampled values."""
        if alg.backend is not VALUES:
            raise InputError("the compensator's polynomial form is model(); sample it with VALUES")
        h = self.loop_factor(alg, values)
        d = self.aol_divider(alg)
        # a resistive network does not depend on s: broadcast it over the frequencies
        return Frac(h.value() / d.value() * np.ones_like(np.asarray(alg.s)), None, VALUES)

    def response(self, freq_hz: np.ndarray, opamp: Any = None,
                 values: dict[str, Any] | None = None) -> np.ndarray:
        """Compensator T/Aol at ``freq_hz`` (``opamp`` is ignored: the op-amp is the plant).

        ``values`` may hold (n, 1) arrays per part; the result is then (n, len(freq_hz)).
        """
        s = 2j * np.pi * np.asarray(freq_hz, dtype=float)
        return self.compensator(Algebra(VALUES, s=s), values).value()

    def _w0(self) -> float:
        taus = [self.parts["Rf"] * self.parts[c] for c in ("Cf", "Cn", "Cs") if c in self.parts]
        if self.load.c_f is not None and self.load.ro_ohm > 0:
            taus.append((self.load.ro_ohm + self.load.esr_ohm) * self.load.c_f)
        if not taus:
            return 2 * math.pi * 1e3
        return 1.0 / math.sqrt(min(taus) * max(taus))

    def model(self, opamp: Any = None) -> PlantModel:
        """Pole/zero model (rad/s) of the compensator T/Aol = h_x · (Ro + ZL)/ZL.

        Zeros: those of h_x and of Ro + ZL; poles: those of h_x and of ZL's
        (1 + s·ESR·CL).  The node equations give h_x a zero at that same root
        (the load branch's own factor), so the pair is cancelled
        (:func:`cancel_pair`).
        """
        w0 = self._w0()
        alg = Algebra(POLY, w0=w0)
        h = self.loop_factor(alg)
        zeros = list(np.roots(trim(h.num)) * w0)
        poles = list(np.roots(trim(h.den)) * w0)
        ld = self.load
        if ld.ro_ohm > 0 and ld.c_f is not None:
            # (Ro + ZL)/ZL = (1 + s(Ro + ESR)CL)/(1 + s·ESR·CL)
            zeros.append(-1.0 / ((ld.ro_ohm + ld.esr_ohm) * ld.c_f))
            if ld.esr_ohm > 0:
                zeros = cancel_pair(zeros, -1.0 / (ld.esr_ohm * ld.c_f), poles)
        z = np.array(zeros, dtype=complex)
        p = np.array(poles, dtype=complex)
        s_ref = np.array([1j * w0])
        unit = np.prod(s_ref[:, None] - z[None, :], axis=1) / np.prod(s_ref[:, None] - p[None, :],
                                                                      axis=1)
        k = complex(self.compensator(Algebra(VALUES, s=s_ref)).value()[0] / unit[0])
        return PlantModel(zeros=z, poles=p, k=float(k.real), provenance=Provenance(
            step="stage_network", settings=self.to_dict()))

    def at(self, freq_hz: np.ndarray, what: str, values: dict[str, Any] | None = None) -> np.ndarray:
        """Sampled passive responses: 'h_x', 'h_in', 'k_x', 'k_in', 'z_ol' (ohm at the load
        node, sources off), 'h_sc' (h_x with the load node shorted)."""
        alg = Algebra(VALUES, s=2j * np.pi * np.asarray(freq_hz, dtype=float))
        cases = {"h_x": ({"x": 1.0}, "n", (), None), "h_in": ({"i": 1.0}, "n", (), None),
                 "k_x": ({"x": 1.0}, "l", (), None), "k_in": ({"i": 1.0}, "l", (), None),
                 "z_ol": ({}, "l", (), "l"), "h_sc": ({"x": 1.0}, "n", ("l",), None)}
        drive, want, grounded, inject = cases[what]
        if inject and self.kind != "isolation" and self.load.ro_ohm <= 0:
            return np.zeros(np.broadcast(alg.s, *(values or {}).values()).shape, dtype=complex)
        n, d = self._solve(alg, values, drive, want, grounded, inject=inject)
        return np.asarray(n / d, dtype=complex) * np.ones_like(alg.s)

    # ----- views -------------------------------------------------------------------------
    def dc_noise_gain(self) -> float:
        """1/β at DC: 1 + Rf/Rg."""
        return 1.0 + (self.parts["Rf"] / self.parts["Rg"] if "Rg" in self.parts else 0.0)

    def ideal_gain(self) -> float:
        """Ideal DC closed-loop gain: 1 + Rf/Rg (non-inverting) or −Rf/Rg (inverting)."""
        r = self.parts["Rf"] / self.parts["Rg"] if "Rg" in self.parts else 0.0
        return 1.0 + r if self.stage == "noninverting" else -r

    def corners_hz(self) -> dict[str, list[float]]:
        m = self.model()
        return {"zeros_hz": sorted(float(abs(x)) / (2 * np.pi) for x in m.zeros if abs(x) > 0),
                "poles_hz": sorted(float(abs(x)) / (2 * np.pi) for x in m.poles if abs(x) > 0)}

    def integrator_hz(self) -> float:
        c = self.corners_hz()
        f = c["zeros_hz"] + c["poles_hz"]
        return float(np.exp(np.mean(np.log(f)))) if f else 1e3

    def practical_warnings(self, label: str = "") -> list[str]:
        """Parts outside a practical range (common practice, no source): feedback resistors
        100 Ω..10 MΩ, feedback-network capacitors (Cf, Cn) 10 pF..10 µF."""
        out = []
        pre = f"{label} " if label else ""
        for n, v in self.parts.items():
            if n in ("Rf", "Rg") and not (100.0 <= v <= 10e6):
                out.append(f"{pre}{n} = {eng(v, 'ohm')} is outside the practical 100 Ω to 10 MΩ range; "
                           "change --r-in")
            elif n in ("Cf", "Cn") and not (10e-12 <= v <= 10e-6):
                out.append(f"{pre}{n} = {eng(v, 'F')} is outside the practical 10 pF to 10 µF range "
                           "for a feedback capacitor")
        return out

    def to_dict(self) -> dict[str, Any]:
        return {"kind": self.kind, "parts": dict(self.parts), "stage": self.stage,
                "load": self.load.to_dict(), "lag_at": self.lag_at}

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> StageNetwork:
        if not isinstance(d, dict) or "kind" not in d or "parts" not in d:
            raise InputError("expected a stage network object with 'kind' and 'parts'")
        return cls(kind=d["kind"], parts=dict(d["parts"]), stage=d.get("stage", "noninverting"),
                   load=StageLoad.from_dict(d.get("load")), lag_at=d.get("lag_at", "across"))

    def with_parts(self, parts: dict[str, float]) -> StageNetwork:
        return StageNetwork(self.kind, parts, self.stage, self.load, self.lag_at)
