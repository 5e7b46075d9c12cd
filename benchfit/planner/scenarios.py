"""Loop gains of our own bench scenarios, for the simulator, the benchmark and the tests.

Each is a :class:`~benchfit.fitting.model.PlantModel` of a loop gain T(s) with a
stated crossover region; the numbers are design choices of ours, not taken
from any product or text.
"""

from __future__ import annotations

import numpy as np

from benchfit.fitting.model import PlantModel
from benchfit.provenance import Provenance

_W = 2.0 * np.pi


def converter_loop() -> PlantModel:
    """Current-mode converter loop, Type II compensation, 6 µs transport delay.

    T(s) = K (1 + s/ωz) / (s (1 + s/ωo)(1 + s/ωh)) · e^(−sτ) with the output pole
    at 300 Hz, the compensator zero at 1.5 kHz and its high-frequency pole at
    40 kHz; K puts the crossover near 5 kHz.  Band 20 Hz .. 100 kHz.
    """
    wz, wo, wh = _W * 1.5e3, _W * 300.0, _W * 40e3
    rational = PlantModel(zeros=np.array([-wz]), poles=np.array([0.0, -wo, -wh]), k=1.0)
    k = 1.0 / abs(rational.response(np.array([5e3]))[0])
    return PlantModel(zeros=np.array([-wz]), poles=np.array([0.0, -wo, -wh]), k=k, delay_s=6e-6,
                      provenance=Provenance(step="scenario", settings={"name": "converter_loop"}))


def regulator_loop() -> PlantModel:
    """Linear regulator loop whose output capacitor's ESR zero (20 kHz) lifts the phase.

    T(s) = A0 (1 + s/ωesr) / ((1 + s/ω1)(1 + s/ω2)(1 + s/ω3)(1 + s/ω4)) with an
    80 dB error amplifier (pole 100 Hz), the load pole at 2 kHz, the pass
    device at 300 kHz and the amplifier's second pole at 1 MHz: crossover near
    97 kHz, the phase crossing near 530 kHz.  Band 10 Hz .. 3 MHz.
    """
    poles = -_W * np.array([100.0, 2e3, 300e3, 1e6])
    wz = _W * 20e3
    a0 = 1e4
    k = a0 * float(np.prod(-poles)) / wz
    return PlantModel(zeros=np.array([-wz]), poles=poles, k=k,
                      provenance=Provenance(step="scenario", settings={"name": "regulator_loop"}))


def servo_loop() -> PlantModel:
    """Position servo with a lead compensator and a mechanical resonance above crossover.

    T(s) = K (1 + s/ωz) / (s (1 + s/ωm)(1 + s/ωl)) · ωr² / (s² + s ωr/Q + ωr²)
    with the mechanical pole at 20 Hz, the lead from 50 Hz to 1 kHz, crossover
    near 150 Hz and a resonance at 1.2 kHz with Q 5, which sets the gain margin.
    Band 5 Hz .. 20 kHz.
    """
    wz, wm, wl, wr, q = _W * 50.0, _W * 20.0, _W * 1e3, _W * 1.2e3, 5.0
    pair = np.roots([1.0, wr / q, wr ** 2])
    poles = np.concatenate([[0.0, -wm, -wl], pair])
    rational = PlantModel(zeros=np.array([-wz]), poles=poles, k=1.0)
    k = 1.0 / abs(rational.response(np.array([150.0]))[0])
    return PlantModel(zeros=np.array([-wz]), poles=poles, k=k,
                      provenance=Provenance(step="scenario", settings={"name": "servo_loop"}))


#: name -> (builder, (f_min_hz, f_max_hz) band to capture)
SCENARIOS = {
    "converter": (converter_loop, (20.0, 100e3)),
    "regulator": (regulator_loop, (10.0, 3e6)),
    "servo": (servo_loop, (5.0, 20e3)),
}
