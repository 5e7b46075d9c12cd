"""The sensing network between the controlled output and the error amplifier.

Either a resistive divider (R_top from the output, R_bottom to ground, gain
R_bottom/(R_top + R_bottom)) or a plain gain (a sense amplifier, a current
sense resistor times an amplifier gain, or 1 when the output feeds the
compensator directly).

When the divider's top resistor is also the compensator's R1 (the usual
single-divider regulator), R_bottom only sets the DC level: the inverting
input is a virtual ground, so describe that case as ``Sensing.plain(1.0)``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from benchfit.errors import InputError
from benchfit.fitting.model import PlantModel
from benchfit.provenance import Provenance


@dataclass(frozen=True)
class Sensing:
    """A frequency-flat sensing gain.

    Parameters
    ----------
    r_top, r_bottom
        Divider resistors in ohm (both or neither).
    plain_gain
        Gain used when no divider is given.
    """

    r_top: float | None = None
    r_bottom: float | None = None
    plain_gain: float = 1.0

    def __post_init__(self) -> None:
        if (self.r_top is None) != (self.r_bottom is None):
            raise InputError("a divider needs both R_top and R_bottom", source="divider")
        if self.r_top is not None:
            for name, v in (("R_top", self.r_top), ("R_bottom", self.r_bottom)):
                if not (math.isfinite(v) and v > 0):
                    raise InputError(f"{name} = {v!r}; expected a resistance > 0 ohm", source="divider")
        elif not (math.isfinite(self.plain_gain) and self.plain_gain != 0):
            raise InputError(f"sensing gain {self.plain_gain!r}; expected a finite non-zero value",
                             source="sensing gain")

    @classmethod
    def divider(cls, r_top: float, r_bottom: float) -> Sensing:
        return cls(r_top=float(r_top), r_bottom=float(r_bottom))

    @classmethod
    def plain(cls, gain: float = 1.0) -> Sensing:
        return cls(plain_gain=float(gain))

    @property
    def is_divider(self) -> bool:
        return self.r_top is not None

    @property
    def gain(self) -> float:
        """The sensing gain (dimensionless)."""
        if self.is_divider:
            return self.r_bottom / (self.r_top + self.r_bottom)
        return self.plain_gain

    def gain_draws(self, r_factor: np.ndarray | None) -> np.ndarray | float:
        """Gain with divider resistors scaled by ``r_factor`` (shape (n, 2)): Monte Carlo."""
        if not self.is_divider or r_factor is None:
            return self.gain
        top = self.r_top * r_factor[:, 0:1]
        bot = self.r_bottom * r_factor[:, 1:2]
        return bot / (top + bot)

    def model(self) -> PlantModel:
        return PlantModel(zeros=np.array([]), poles=np.array([]), k=self.gain,
                          provenance=Provenance(step="sensing", settings=self.to_dict()))

    def to_dict(self) -> dict[str, Any]:
        return {"gain": self.gain, "r_top": self.r_top, "r_bottom": self.r_bottom}

    @classmethod
    def from_dict(cls, d: dict[str, Any] | None) -> Sensing:
        if not d:
            return cls.plain(1.0)
        if d.get("r_top") is not None or d.get("r_bottom") is not None:
            return cls(r_top=float(d["r_top"]), r_bottom=float(d["r_bottom"]))
        return cls.plain(float(d.get("gain", 1.0)))
