"""What a loop design must achieve, and the record of where a placement put the network.

:class:`Targets` (crossover, phase and gain margin, with the one no-slack test
:meth:`Targets.met`) and :class:`Synthesis` (the placed network, the method,
the boost and K factor, the design phase margin, the rate of closure and the
notes).  The placement itself is :func:`benchfit.loop.synthesis.synthesize`;
both classes are re-exported there.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from benchfit.errors import InputError
from benchfit.loop.networks import Network
from benchfit.loop.passrules import meets_gain_margin, meets_phase_margin


@dataclass(frozen=True)
class Targets:
    """What the loop must achieve.

    Parameters
    ----------
    crossover_hz
        Requested crossover in Hz, or None to let synthesis pick the highest
        one that meets the margins.
    phase_margin_deg
        Minimum phase margin, degrees.
    gain_margin_db
        Minimum gain margin, dB.
    """

    crossover_hz: float | None = None
    phase_margin_deg: float = 60.0
    gain_margin_db: float = 10.0

    def __post_init__(self) -> None:
        for name in ("phase_margin_deg", "gain_margin_db"):
            object.__setattr__(self, name, float(getattr(self, name)))
        if self.crossover_hz is not None:
            object.__setattr__(self, "crossover_hz", float(self.crossover_hz))
        if self.crossover_hz is not None and not (math.isfinite(self.crossover_hz)
                                                   and self.crossover_hz > 0):
            raise InputError(f"crossover {self.crossover_hz!r}; expected a frequency > 0 Hz or auto",
                             source="--crossover")
        if not (0 < self.phase_margin_deg < 180):
            raise InputError(f"phase margin {self.phase_margin_deg!r}; expected 0..180 degrees",
                             source="--phase-margin")
        if not (math.isfinite(self.gain_margin_db) and self.gain_margin_db >= 0):
            raise InputError(f"gain margin {self.gain_margin_db!r}; expected >= 0 dB",
                             source="--gain-margin")

    def met(self, pm_deg: float, gm_db: float) -> bool:
        """Whether a phase margin and a gain margin meet the targets, with no slack.

        The rules are :func:`benchfit.loop.passrules.meets_phase_margin` and
        :func:`~benchfit.loop.passrules.meets_gain_margin` (exact to the
        arithmetic's resolution, 1e-9); a phase margin that is not finite
        (no gain crossing, or the band misses it) does not meet a target here:
        the caller judges a placed loop, which has a crossover.
        """
        return bool(np.isfinite(pm_deg) and meets_phase_margin(pm_deg, self.phase_margin_deg)
                    and meets_gain_margin(gm_db, self.gain_margin_db))

    def to_dict(self) -> dict[str, Any]:
        return {"crossover_hz": self.crossover_hz, "phase_margin_deg": self.phase_margin_deg,
                "gain_margin_db": self.gain_margin_db}

    @classmethod
    def from_dict(cls, d: dict[str, Any] | None) -> Targets:
        d = d or {}
        fc = d.get("crossover_hz")
        return cls(crossover_hz=None if fc in (None, "auto") else float(fc),
                   phase_margin_deg=float(d.get("phase_margin_deg", 60.0)),
                   gain_margin_db=float(d.get("gain_margin_db", 10.0)))


@dataclass(frozen=True)
class Synthesis:
    """Where the network's corners went and why.

    Attributes
    ----------
    network
        The network with ideal (unsnapped) part values.
    method
        'k-factor' or 'crossing'.
    crossover_hz
        Crossover the network was placed for.
    plant_phase_deg
        ∠(plant·sensing) at the crossover on the first corner, in (−360, 0].
    boost_deg, k
        Phase boost and K factor used (k = 1 for type1; for pi, ωc/ωz).
    design_pm_deg
        Phase margin the placement aimed at (> target when extra was needed
        for a finite op-amp or several corners).
    rate_of_closure_db
        1/beta rate of closure at the crossover, dB/decade (first corner, the placed
        network's actual slope: :func:`benchfit.loop.closure.rate_of_closure_db`).
    notes
        Plain-language remarks (boost clamped, target out of reach...).
    """

    network: Network
    method: str
    crossover_hz: float
    plant_phase_deg: float
    boost_deg: float
    k: float
    design_pm_deg: float
    rate_of_closure_db: float
    notes: tuple[str, ...] = ()

    def to_dict(self) -> dict[str, Any]:
        return {"network": self.network.to_dict(), "method": self.method,
                "crossover_hz": self.crossover_hz, "plant_phase_deg": self.plant_phase_deg,
                "boost_deg": self.boost_deg, "k": self.k, "design_pm_deg": self.design_pm_deg,
                "rate_of_closure_db": self.rate_of_closure_db, "notes": list(self.notes)}
