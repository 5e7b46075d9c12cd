"""What an op-amp stage's output drives: its own output resistance and the load capacitor."""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

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
