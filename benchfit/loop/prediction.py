"""Predicting a part set on every plant corner, and the warnings a design's prediction earns.

:func:`predict` gives a :class:`Prediction` (margins of one part set on each
corner); :func:`target_warnings`, :func:`sign_warnings` and
:func:`opamp_warnings` say what is wrong with it.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from benchfit.data.response import FrequencyResponse
from benchfit.fitting.model import PlantModel
from benchfit.loop.loopgain import Loop, LoopPlant
from benchfit.loop.marginsresult import Margins
from benchfit.loop.networks import Network
from benchfit.loop.opamp import OpAmp
from benchfit.loop.synthesis import Targets

#: Op-amp phase lost at the crossover that earns a warning, degrees.
OPAMP_PHASE_WARN_DEG = 3.0
#: Slack when judging a predicted margin against its target.
MARGIN_SLACK = 0.1


def sign_warnings(corners: Sequence[LoopPlant]) -> list[str]:
    """Warn when plant · sensing is inverting at low frequency.

    The compensator folds the error amplifier's inversion into the loop sign;
    an inverting plant (e.g. through an optocoupler) then makes the feedback
    positive.  A low-frequency phase beyond ±90° (after removing integrators'
    −90° each; beyond ±150° for measured data) is the sign of that.
    """
    out = []
    for lp in corners:
        f0 = lp.band_hz[0]
        ph = math.degrees(np.angle(lp.response(np.array([f0]))[0]))
        if not lp.is_data:
            ph += 90.0 * int(np.sum(np.abs(lp.plant.poles) == 0))
            ph -= 90.0 * int(np.sum(np.abs(lp.plant.zeros) == 0))
        ph = 180.0 - ((180.0 - ph) % 360.0)
        # data: integrators cannot be told apart, so only a clear inversion counts
        if abs(ph) > (150.0 if lp.is_data else 90.0):
            out.append(f"{lp.name}: plant · sensing is inverting at {f0:.4g} Hz (phase "
                       f"{ph:.0f}°): with an inverting error amplifier the feedback is positive; "
                       "use a negative sensing gain or a non-inverting error amplifier")
    return out


def opamp_warnings(net: Network, opamp: OpAmp | None, fc_hz: float) -> list[str]:
    """Warn when the op-amp costs visible phase or gain at the crossover."""
    if opamp is None or not np.isfinite(fc_hz):
        return []
    f = np.array([fc_hz])
    ideal = net.response(f)[0]
    real = net.response(f, opamp)[0]
    dphi = math.degrees(np.angle(ideal / real))
    ddb = 20 * math.log10(abs(ideal / real))
    if dphi > OPAMP_PHASE_WARN_DEG or abs(ddb) > 1.0:
        return [f"op-amp GBW {opamp.gbw_hz:.4g} Hz is too close to the {fc_hz:.4g} Hz crossover: "
                f"it costs {dphi:.1f}° of phase and {ddb:.1f} dB of gain there (included in the "
                "predictions, but the op-amp's own spread is not); choose a faster op-amp or a "
                "lower crossover"]
    return []


@dataclass(frozen=True, eq=False)
class Prediction:
    """Margins of one part set on every plant corner."""

    network: Network
    compensator: PlantModel
    corners: tuple[Margins, ...]
    loops: tuple[PlantModel | FrequencyResponse, ...]

    @property
    def worst(self) -> int:
        pm = [m.phase_margin_deg if m.closed_loop_stable else -math.inf for m in self.corners]
        pm = [-math.inf if math.isnan(p) else p for p in pm]
        return int(np.argmin(pm))

    def worst_margins(self) -> Margins:
        return self.corners[self.worst]


def predict(corners: Sequence[LoopPlant], net: Network, opamp: OpAmp | None) -> Prediction:
    """Margins of ``net`` with ``opamp`` on every corner."""
    loops = [Loop(lp, net, opamp) for lp in corners]
    return Prediction(network=net, compensator=net.model(opamp),
                      corners=tuple(lo.margins() for lo in loops),
                      loops=tuple(lo.data() if lo.plant.is_data else lo.model() for lo in loops))


def target_warnings(pred: Prediction, targets: Targets, names: Sequence[str],
                    label: str) -> list[str]:
    out = []
    for m, name in zip(pred.corners, names, strict=True):
        where = f"{label} parts on {name}" if len(names) > 1 else f"{label} parts"
        if not m.closed_loop_stable:
            out.append(f"{where}: the closed loop is unstable")
            continue
        if not (m.phase_margin_deg >= targets.phase_margin_deg - MARGIN_SLACK):
            out.append(f"{where}: phase margin {m.phase_margin_deg:.1f}° is below the "
                       f"{targets.phase_margin_deg:g}° target")
        if m.gain_margin_db < targets.gain_margin_db - MARGIN_SLACK:
            out.append(f"{where}: gain margin {m.gain_margin_db:.1f} dB is below the "
                       f"{targets.gain_margin_db:g} dB target")
    return out
