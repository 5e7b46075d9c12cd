"""What an op-amp stage's output drives: its own output resistance and the load capacitor."""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from benchfit.errors import InputError


@dataclass(frozen=True)
class StageLoad:
    """What the op-amp output drives: its own output resistance and the load capacitor.

    Parameters
    ----------
    ro_ohm
        Open-loop output resistance of the op-amp (and output stage), ohm; 0 when unknown.
    c_f
        Load capacitance, F (None: no capacitor known).
    esr_ohm
        The capacitor's equivalent series resistance, ohm.
    """

    ro_ohm: float = 0.0
    c_f: float | None = None
    esr_ohm: float = 0.0

    def __post_init__(self) -> None:
        for name, v, lo in (("output resistance", self.ro_ohm, 0.0), ("ESR", self.esr_ohm, 0.0)):
            if not (math.isfinite(v) and v >= lo):
                raise InputError(f"{name} {v!r}; expected a finite value >= 0 ohm", source="--load")
        if self.c_f is not None and not (math.isfinite(self.c_f) and self.c_f > 0):
            raise InputError(f"load capacitance {self.c_f!r}; expected > 0 F", source="--load-cap")

    @property
    def known(self) -> bool:
        return self.ro_ohm > 0 and self.c_f is not None

    def load_pole_hz(self) -> float | None:
        """Pole of Aol from Ro and the capacitor, 1/(2π(Ro + ESR)CL)."""
        if not self.known:
            return None
        return 1.0 / (2 * math.pi * (self.ro_ohm + self.esr_ohm) * self.c_f)

    def esr_zero_hz(self) -> float | None:
        """Zero of Aol from the capacitor's ESR, 1/(2π·ESR·CL)."""
        if self.c_f is None or self.esr_ohm <= 0:
            return None
        return 1.0 / (2 * math.pi * self.esr_ohm * self.c_f)

    def to_dict(self) -> dict[str, Any]:
        return {"ro_ohm": self.ro_ohm, "c_f": self.c_f, "esr_ohm": self.esr_ohm}

    @classmethod
    def from_dict(cls, d: dict[str, Any] | None) -> StageLoad:
        d = d or {}
        return cls(ro_ohm=float(d.get("ro_ohm", 0.0)),
                   c_f=None if d.get("c_f") is None else float(d["c_f"]),
                   esr_ohm=float(d.get("esr_ohm", 0.0)))


#: How far the stated load pole 1/(2π(Ro + ESR)CL) may sit from the one the data show, beyond the
#: data's own 3σ, before the two are called contradictory: the stated Ro, CL and ESR are nominal
#: figures (a capacitor's ±20 % tolerance and DC-bias loss, an output resistance known to a few
#: tens of %).  Common practice, no source.
STATED_LOAD_TOLERANCE = 0.25

#: The load's pole and its ESR zero sit a ratio (Ro + ESR)/ESR apart whatever CL is; a fitted real
#: pole and real zero whose ratio is within this factor of it are taken as the load's pair (ESR
#: and Ro are nominal figures too).  Common practice, no source.
PAIR_RATIO_FACTOR = 2.0


@dataclass(frozen=True)
class LoadEvidence:
    """What the measured Aol says about the stated load (:func:`load_pole_evidence`).

    ``verdict`` is "consistent", "contradicts" (the data show the load's pole elsewhere),
    "not shown" (no real pole of the fitted Aol near the stated one, inside its band) or
    "cannot tell" (the stated pole lies outside the band and no load pair was found).
    ``data_pole_hz``/``data_cap_f`` are the load pole the data show and the CL it implies
    (with the stated Ro and ESR), when the pole/ESR-zero pair identified it.
    """

    verdict: str
    stated_pole_hz: float
    data_pole_hz: float | None = None
    data_cap_f: float | None = None
    nearest_poles_hz: tuple[float, ...] = ()
    allowed: float = 0.0

    def to_dict(self) -> dict[str, Any]:
        return {"verdict": self.verdict, "stated_pole_hz": self.stated_pole_hz,
                "data_pole_hz": self.data_pole_hz, "data_cap_f": self.data_cap_f,
                "nearest_poles_hz": list(self.nearest_poles_hz), "allowed": self.allowed}

    def message(self, load: StageLoad) -> str | None:
        """The warning naming the options and the pole the data show (None when consistent)."""
        from benchfit.numfmt import eng

        said = (f"--output-resistance {eng(load.ro_ohm, 'Ω')}, --load-cap {eng(load.c_f, 'F')}"
                + (f", --load-esr {eng(load.esr_ohm, 'Ω')}" if load.esr_ohm > 0 else "")
                + f" put the output pole 1/(2π(Ro + ESR)CL) at {eng(self.stated_pole_hz, 'Hz')}")
        if self.verdict == "contradicts":
            return (f"{said}, but the measured Aol shows the load's pole at "
                    f"{eng(self.data_pole_hz, 'Hz')} (paired with its ESR zero), i.e. CL ≈ "
                    f"{eng(self.data_cap_f, 'F')} with that Ro; check --load-cap and "
                    "--output-resistance")
        if self.verdict == "not shown":
            near = ", ".join(eng(p, "Hz") for p in self.nearest_poles_hz) or "none"
            return (f"{said}, but the measured Aol has no real pole within "
                    f"{self.allowed * 100:.0f} % of it (its nearest: {near}); check --load-cap "
                    "and --output-resistance")
        return None


def load_pole_evidence(model: Any, load: StageLoad, band_hz: tuple[float, float],
                       rel_sigma: Any = None) -> LoadEvidence | None:
    """Does the measured (fitted) Aol show the output pole the stated load implies?

    The plant is the Aol measured with the load on, ``Aol = A·ZL/(Ro + ZL)``, whose load
    factor ``(1 + s·ESR·CL)/(1 + s(Ro + ESR)CL)`` puts a real pole at
    1/(2π(Ro + ESR)CL) and, with an ESR, a real zero (Ro + ESR)/ESR times higher — a
    ratio that does not depend on CL.  Evidence weighed, in this order:

    1. with an ESR, a real pole and a real zero of the model inside the band whose ratio
       is within :data:`PAIR_RATIO_FACTOR` of (Ro + ESR)/ESR (the nearest such pair) are
       the load's pair; its pole is compared with the stated one;
    2. otherwise, when the stated pole lies inside the band, the model's real pole
       nearest to it is compared with it ("not shown" when none is close); outside
       the band the data cannot tell.

    Two poles agree when their ratio is within 1 + :data:`STATED_LOAD_TOLERANCE` and the
    data's 3σ (``rel_sigma(f_hz)``: the fitted pole's relative standard error, 0 when
    not known).  Returns None when Ro or CL is not given.
    """
    if not load.known:
        return None
    stated = float(load.load_pole_hz())
    lo, hi = band_hz
    poles = np.array([abs(p.real) / (2 * math.pi) for p in model.poles
                      if p.imag == 0 and p.real < 0 and lo <= abs(p.real) / (2 * math.pi) <= hi])
    zeros = np.array([abs(z.real) / (2 * math.pi) for z in model.zeros
                      if z.imag == 0 and z.real < 0 and lo <= abs(z.real) / (2 * math.pi) <= hi])

    def allowed(f_hz: float) -> float:
        s = float(rel_sigma(f_hz)) if rel_sigma is not None else 0.0
        return math.log1p(STATED_LOAD_TOLERANCE) + 3.0 * (s if math.isfinite(s) else 0.0)

    tol = STATED_LOAD_TOLERANCE
    if load.esr_ohm > 0 and poles.size and zeros.size:
        want = math.log((load.ro_ohm + load.esr_ohm) / load.esr_ohm)
        d = np.abs(np.log(zeros[None, :] / poles[:, None]) - want)
        i, j = np.unravel_index(int(np.argmin(d)), d.shape)
        if d[i, j] <= math.log(PAIR_RATIO_FACTOR):
            p = float(poles[i])
            a = allowed(p)
            if abs(math.log(p / stated)) <= a:
                return LoadEvidence("consistent", stated, p, None, (p,), math.expm1(a))
            cap = 1.0 / (2 * math.pi * (load.ro_ohm + load.esr_ohm) * p)
            return LoadEvidence("contradicts", stated, p, cap, (p,), math.expm1(a))
    if not (lo <= stated <= hi):
        return LoadEvidence("cannot tell", stated, allowed=tol)
    if poles.size:
        order = np.argsort(np.abs(np.log(poles / stated)))
        p = float(poles[order[0]])
        a = allowed(p)
        if abs(math.log(p / stated)) <= a:
            return LoadEvidence("consistent", stated, p, None, (p,), math.expm1(a))
        below, above = poles[poles < stated], poles[poles > stated]
        near = tuple(float(x) for x in (below.max() if below.size else None,
                                        above.min() if above.size else None) if x is not None)
        return LoadEvidence("not shown", stated, None, None, near, math.expm1(a))
    return LoadEvidence("not shown", stated, allowed=tol)
