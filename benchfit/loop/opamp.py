"""A finite op-amp: DC gain, gain-bandwidth product and an optional second pole.

Open-loop gain::

    A(s) = A0 / ((1 + s/wp1) · (1 + s/wp2)),   wp1 = 2π·GBW/A0

so |A| falls through 1 near GBW (for a second pole well above GBW).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from benchfit.errors import InputError
from benchfit.loop.rational import Algebra, Frac


@dataclass(frozen=True)
class OpAmp:
    """Open-loop model of the error amplifier.

    Parameters
    ----------
    gbw_hz
        Gain-bandwidth product in Hz.
    dc_gain_db
        Open-loop DC gain in dB (e.g. 100 dB).
    second_pole_hz
        Optional second pole in Hz (``None`` for none).
    """

    gbw_hz: float
    dc_gain_db: float = 100.0
    second_pole_hz: float | None = None

    def __post_init__(self) -> None:
        if not (math.isfinite(self.gbw_hz) and self.gbw_hz > 0):
            raise InputError(f"op-amp GBW must be a positive frequency in Hz, found {self.gbw_hz}",
                             source="opamp gbw_hz")
        if not (math.isfinite(self.dc_gain_db) and self.dc_gain_db > 0):
            raise InputError(f"op-amp DC gain must be > 0 dB, found {self.dc_gain_db}",
                             source="opamp dc_gain_db")
        if self.second_pole_hz is not None and not (self.second_pole_hz > 0):
            raise InputError(f"op-amp second pole must be > 0 Hz, found {self.second_pole_hz}",
                             source="opamp second_pole_hz")

    @property
    def dc_gain(self) -> float:
        """A0 as a plain ratio."""
        return 10.0 ** (self.dc_gain_db / 20.0)

    @property
    def first_pole_hz(self) -> float:
        """Dominant pole GBW/A0 in Hz."""
        return self.gbw_hz / self.dc_gain

    def gain(self, alg: Algebra) -> Frac:
        """A(s) in the given algebra."""
        w1 = 2 * np.pi * self.first_pole_hz
        w2 = math.inf if self.second_pole_hz is None else 2 * np.pi * self.second_pole_hz
        return alg.const(self.dc_gain) * alg.pole(w1) * alg.pole(w2)

    def response(self, freq_hz: np.ndarray) -> np.ndarray:
        """Complex open-loop gain A(j2πf)."""
        from benchfit.loop.rational import VALUES

        s = 2j * np.pi * np.asarray(freq_hz, dtype=float)
        return self.gain(Algebra(VALUES, s=s)).value()

    def to_dict(self) -> dict[str, Any]:
        return {"gbw_hz": self.gbw_hz, "dc_gain_db": self.dc_gain_db,
                "second_pole_hz": self.second_pole_hz}

    @classmethod
    def from_dict(cls, d: dict[str, Any] | None) -> OpAmp | None:
        if not d:
            return None
        try:
            return cls(gbw_hz=float(d["gbw_hz"]), dc_gain_db=float(d.get("dc_gain_db", 100.0)),
                       second_pole_hz=None if d.get("second_pole_hz") is None
                       else float(d["second_pole_hz"]))
        except (KeyError, TypeError, ValueError) as e:
            raise InputError(f"op-amp description {d!r} is not valid ({e}); expected gbw_hz, "
                             "dc_gain_db, second_pole_hz") from None
