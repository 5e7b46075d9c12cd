"""The loop gain T = plant · sensing · compensator, from a model or a measured sweep.

The plant is either a :class:`~benchfit.fitting.model.PlantModel` (fitted or
typed in) or a measured :class:`~benchfit.data.response.FrequencyResponse`.
With a model, T is itself a PlantModel (network and op-amp are rational);
with data, T is known at the sweep's frequencies only.

Redesign from a measured loop: when the loop gain of a board was measured
with a known compensator in place, the rest of the loop is
``T_meas / C_old`` (see :func:`plant_from_measured_loop`), and the new loop is
``T_meas · C_new / C_old``.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from benchfit.data.response import FrequencyResponse
from benchfit.errors import InputError
from benchfit.fitting.model import PlantModel
from benchfit.loop.networks import Network
from benchfit.loop.opamp import OpAmp
from benchfit.loop.sensing import Sensing
from benchfit.provenance import Provenance

#: Points per decade of the grids margins are evaluated on.
GRID_PER_DECADE = 60


def interp_response(resp: FrequencyResponse, freq_hz: np.ndarray) -> np.ndarray:
    """Complex response at ``freq_hz``: log-magnitude and unwrapped phase,
    linear in log-frequency.  Outside the sweep the values are NaN (no extrapolation)."""
    f = np.asarray(freq_hz, dtype=float)
    lf = np.log10(resp.freq_hz)
    mag = np.interp(np.log10(f), lf, np.log(np.abs(resp.response)))
    ph = np.interp(np.log10(f), lf, np.unwrap(np.angle(resp.response)))
    out = np.exp(mag + 1j * ph)
    out[(f < resp.f_min_hz * (1 - 1e-12)) | (f > resp.f_max_hz * (1 + 1e-12))] = np.nan
    return out


def _model_band(m: PlantModel) -> tuple[float, float]:
    w = np.abs(np.concatenate([m.zeros, m.poles]))
    w = w[w > 0]
    if w.size == 0:
        return 1.0, 1e6
    lo, hi = float(w.min()) / (2 * np.pi), float(w.max()) / (2 * np.pi)
    if m.delay_s > 0:
        hi = max(hi, 1.0 / m.delay_s)
    return lo / 100.0, hi * 100.0


@dataclass(frozen=True, eq=False)
class LoopPlant:
    """Plant and sensing: everything in the loop but the compensator.

    Parameters
    ----------
    plant
        Model or measured response of the power stage (or of the whole rest of
        the loop, for a redesign).
    sensing
        Divider or plain gain.
    name
        Label used in reports (file name, corner name).
    band_hz
        Frequencies where the plant is trusted (fit band or sweep span).
        Defaults to the sweep span, or for a model two decades beyond its
        outermost pole/zero.
    draws
        Optional ``draw_responses(freq_hz, n, rng)`` of the plant's fit, for
        the Monte Carlo over fitted-parameter uncertainty.
    warnings
        What reading and fitting the plant's file warned of (skipped rows, a file holding
        several traces, a fit above the noise floor...); a design repeats them.
    """

    plant: PlantModel | FrequencyResponse
    sensing: Sensing = field(default_factory=Sensing.plain)
    name: str = "plant"
    band_hz: tuple[float, float] | None = None
    draws: Callable[..., np.ndarray] | None = None
    warnings: tuple[str, ...] = ()

    def __post_init__(self) -> None:
        if not isinstance(self.plant, (PlantModel, FrequencyResponse)):
            raise InputError(f"plant must be a model or a sweep, found {type(self.plant).__name__}")
        if self.band_hz is None:
            band = ((self.plant.f_min_hz, self.plant.f_max_hz) if self.is_data
                    else _model_band(self.plant))
            object.__setattr__(self, "band_hz", (float(band[0]), float(band[1])))

    @property
    def is_data(self) -> bool:
        return isinstance(self.plant, FrequencyResponse)

    def response(self, freq_hz: np.ndarray) -> np.ndarray:
        """plant · sensing at ``freq_hz`` (NaN outside a sweep)."""
        f = np.asarray(freq_hz, dtype=float)
        h = interp_response(self.plant, f) if self.is_data else self.plant.response(f)
        return h * self.sensing.gain

    def grid(self, f_lo: float | None = None, f_hi: float | None = None) -> np.ndarray:
        """Frequencies to evaluate the loop on: the sweep's own points, or a
        dense log grid over the band widened to ``f_lo``..``f_hi`` for a model."""
        if self.is_data:
            return np.asarray(self.plant.freq_hz)
        lo = min(self.band_hz[0], f_lo or np.inf)
        hi = max(self.band_hz[1], f_hi or 0.0)
        n = int(np.ceil(np.log10(hi / lo) * GRID_PER_DECADE)) + 1
        return np.logspace(np.log10(lo), np.log10(hi), n)

    def model(self) -> PlantModel:
        if self.is_data:
            raise InputError(f"{self.name}: measured plant has no model")
        return self.plant.cascade(self.sensing.model(), step="plant_sensing")

    @property
    def unstable_poles(self) -> int:
        """Open-loop right-half-plane poles (0 for measured data: not knowable)."""
        return 0 if self.is_data else int(np.sum(self.plant.poles.real > 0))


@dataclass(frozen=True, eq=False)
class Loop:
    """A closed loop: plant · sensing · compensator network with its op-amp."""

    plant: LoopPlant
    network: Network
    opamp: OpAmp | None = None

    def compensator(self) -> PlantModel:
        """The compensator model C (sign folded, see :mod:`benchfit.loop.networks`)."""
        return self.network.model(self.opamp)

    def response(self, freq_hz: np.ndarray) -> np.ndarray:
        """T(f) (NaN outside a sweep for measured plants)."""
        return self.plant.response(freq_hz) * self.network.response(freq_hz, self.opamp)

    def model(self) -> PlantModel:
        """T as a PlantModel (only when the plant is a model)."""
        t = self.plant.model().cascade(self.compensator(), step="loop_gain")
        return PlantModel(zeros=t.zeros, poles=t.poles, k=t.k, delay_s=t.delay_s,
                          provenance=Provenance(step="loop_gain", settings={
                              "network": self.network.to_dict(),
                              "opamp": None if self.opamp is None else self.opamp.to_dict(),
                              "sensing": self.plant.sensing.to_dict()},
                              parents=(self.plant.plant.provenance.to_dict(),)))

    def data(self) -> FrequencyResponse:
        """T at the measured plant's frequencies."""
        if not self.plant.is_data:
            raise InputError("loop data asked of a model plant; use model()")
        f = self.plant.plant.freq_hz
        return self.plant.plant.with_response(self.response(f), quantity="loop", step="loop_gain",
                                              settings={"network": self.network.to_dict()})

    def margins(self) -> Any:
        """Margins of T (:mod:`benchfit.loop.margins`), from the model or the data."""
        from benchfit.loop import margins as mg

        if self.plant.is_data:
            return mg.margins_of_sweep(self.data())
        return mg.margins_of_model(self.model(), unstable_open_loop_poles=self.plant.unstable_poles)


def plant_from_measured_loop(measured_loop: FrequencyResponse, old: Network,
                             old_opamp: OpAmp | None = None) -> FrequencyResponse:
    """The rest of the loop, T_meas / C_old, from a loop gain measured with ``old`` fitted.

    Pair it with ``Sensing.plain(1.0)``: the measured loop already holds the sensing gain.
    """
    c_old = old.response(measured_loop.freq_hz, old_opamp)
    return measured_loop.with_response(measured_loop.response / c_old, quantity="plant",
                                       step="remove_compensator",
                                       settings={"old_network": old.to_dict(),
                                                 "old_opamp": None if old_opamp is None
                                                 else old_opamp.to_dict()})
