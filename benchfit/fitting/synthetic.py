"""Known models of our own for tests, benchmarks and examples, and noisy sweeps of them.

Nothing here is measured: these are scenarios built from plain pole/zero
lists so a fit can be checked against the truth.
"""

from __future__ import annotations

import numpy as np

from benchfit.data.response import FrequencyResponse
from benchfit.fitting.model import PlantModel
from benchfit.provenance import Provenance

TWO_PI = 2.0 * np.pi


def pair(f0_hz: float, q: float) -> list[complex]:
    """The two poles (or zeros) of s² + (ω0/Q)s + ω0² in rad/s (Q > 0.5: complex)."""
    w0 = TWO_PI * f0_hz
    a = -w0 / (2.0 * q)
    b = w0 * np.sqrt(complex(1.0 - 1.0 / (4.0 * q * q)))
    return [complex(a + 1j * b), complex(a - 1j * b)]


def from_factors(gain: float, poles_hz=(), pairs=(), zeros_hz=(), zero_pairs=(),
                 integrators: int = 0, delay_s: float = 0.0, step: str = "synthetic") -> PlantModel:
    """A PlantModel from the factored form (see :mod:`benchfit.fitting.parameters`).

    Real frequencies are signed: negative means a right-half-plane root.
    ``gain`` is the low-frequency gain (of s^m·H with m integrators).
    """
    p = [complex(-TWO_PI * f) for f in poles_hz] + [x for f0, q in pairs for x in pair(f0, q)]
    z = [complex(-TWO_PI * f) for f in zeros_hz] + [x for f0, q in zero_pairs for x in pair(f0, q)]
    p_arr = np.asarray(p, dtype=complex)
    z_arr = np.asarray(z, dtype=complex)
    k = gain * float(np.real(np.prod(-p_arr) / np.prod(-z_arr)))
    return PlantModel(zeros=z_arr, poles=np.concatenate([p_arr, np.zeros(integrators)]), k=k,
                      delay_s=delay_s, provenance=Provenance(step=step))


def converter_plant(delay_s: float = 0.0) -> PlantModel:
    """An 8th-order converter-like plant: LC pair, ESR zero, a right-half-plane zero,
    modulator and driver poles; about 140 dB of gain span over 10 Hz..10 MHz."""
    return from_factors(
        gain=10.0,
        poles_hz=(300e3, 3e6),
        pairs=((20e3, 3.0), (1e6, 1.5), (6e6, 0.8)),
        zeros_hz=(60e3, -2e6),
        delay_s=delay_s,
        step="converter_plant",
    )


def sweep(model: PlantModel, freq_hz: np.ndarray | None = None, *, noise_db: float = 0.0,
          noise_deg: float = 0.0, rng: np.random.Generator | None = None,
          quantity: str = "plant") -> FrequencyResponse:
    """The model's response, with Gaussian magnitude (dB) and phase (deg) noise per point.

    Default grid: 1601 log-spaced points over 10 Hz..10 MHz.
    """
    f = np.geomspace(10.0, 10e6, 1601) if freq_hz is None else np.asarray(freq_hz, dtype=float)
    h = model.response(f)
    if noise_db or noise_deg:
        rng = np.random.default_rng() if rng is None else rng
        h = h * 10.0 ** (rng.normal(0.0, noise_db, f.shape) / 20.0) \
            * np.exp(1j * np.radians(rng.normal(0.0, noise_deg, f.shape)))
    return FrequencyResponse(freq_hz=f, response=h, quantity=quantity,
                             provenance=Provenance(step="synthetic_sweep",
                                                   settings={"noise_db": noise_db,
                                                             "noise_deg": noise_deg}))
