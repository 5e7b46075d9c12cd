"""Plant models of our own scenarios, shared by several test modules."""

import numpy as np

from benchfit.fitting.model import PlantModel


def buck_plant() -> PlantModel:
    """Voltage-mode buck control-to-output: 5 kHz LC (Q 2), ESR zero at 80 kHz, gain 12."""
    w0, q, wz = 2 * np.pi * 5e3, 2.0, 2 * np.pi * 80e3
    return PlantModel(zeros=np.array([-wz]), poles=np.roots([1, w0 / q, w0 ** 2]), k=12 * w0 ** 2 / wz)
