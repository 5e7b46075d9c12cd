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
from benchfit.loop.passrules import shortfalls, worst_of
from benchfit.loop.targets import Targets

#: Op-amp phase lost at the crossover that earns a warning, degrees.
OPAMP_PHASE_WARN_DEG = 3.0


def sign_warnings(corners: Sequence[LoopPlant]) -> list[str]:
    """Warn when plant · sensing is inverting at low frequency.

    The compensator folds the error amplifier's inversion into the loop sign;
    an inverting plant (e.g. through an optocoupler) then makes the feedback
    positive.  A low-frequency phase beyond ±90° after removing integrators'
    −90° each is the sign of that.  A model counts its poles at s = 0; a
    measured plant's count comes from the fit of its low-frequency asymptote
    (:func:`benchfit.loop.asymptote.fit_asymptote`, the estimate the margins
    use), whose asymptotic phase is then compared; when that fit does not
    decide the count, only a phase beyond ±150° at the bottom of the band counts.
    """
    from benchfit.loop.asymptote import fit_asymptote

    out = []
    for lp in corners:
        f0 = lp.band_hz[0]
        ph = math.degrees(np.angle(lp.response(np.array([f0]))[0]))
        limit = 90.0
        if not lp.is_data:
            ph += 90.0 * int(np.sum(np.abs(lp.plant.poles) == 0))
            ph -= 90.0 * int(np.sum(np.abs(lp.plant.zeros) == 0))
        else:
            f = np.asarray(lp.plant.freq_hz, dtype=float)
            asym = fit_asymptote(f, lp.response(f))[0]
            if asym.decided:
                ph = asym.phase_deg + 90.0 * asym.n
            else:
                limit = 150.0     # integrators not told apart: only a clear inversion counts
        ph = 180.0 - ((180.0 - ph) % 360.0)
        if abs(ph) > limit:
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


def shown(value: float, target: float) -> str:
    """``value`` with enough decimals that a shortfall shows (44.995 below 45 is not "45.0")."""
    for digits in range(1, 7):
        if round(value, digits) < target:
            return f"{value:.{digits}f}"
    return f"{target:g} - {target - value:.1e}"


def target_warnings(pred: Prediction, targets: Targets, names: Sequence[str],
                    label: str, crossings: str | tuple[float, float] = "all") -> list[str]:
    """One warning per corner and kind whose margins miss a target (no slack).

    The rule is :func:`benchfit.loop.passrules.shortfalls` (every counted
    crossing, stable closed loop), the one the Monte Carlo yield uses; each
    message quotes the crossing furthest below its target, as listed in
    the corner's margins.
    """
    out = []
    for m, name in zip(pred.corners, names, strict=True):
        where = f"{label} parts on {name}" if len(names) > 1 else f"{label} parts"
        short = shortfalls(m, targets, crossings)
        if short and short[0]["kind"] == "stability":
            out.append(f"{where}: the closed loop is {short[0]['verdict']}")
            continue
        g = worst_of(short, "gain")
        if g is not None:
            at = "" if g["freq_hz"] == m.crossover_hz else f" at the {g['freq_hz']:.4g} Hz crossing"
            out.append(f"{where}: phase margin {shown(g['value'], g['target'])}°{at} is below the "
                       f"{targets.phase_margin_deg:g}° target")
        p = worst_of(short, "phase")
        if p is not None:
            v = p["value"]
            at = "" if p["freq_hz"] == m.phase_crossover_hz else f" at {p['freq_hz']:.4g} Hz"
            what = "gain margin" if v >= 0 else "gain reduction margin"
            out.append(f"{where}: {what} {shown(abs(v), p['target'])} dB{at} is below the "
                       f"{targets.gain_margin_db:g} dB target")
    return out
