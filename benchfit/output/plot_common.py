"""Helpers every plot module shares: curve sampling, phase branches, axis limits."""

from __future__ import annotations

from typing import Any

import numpy as np
from matplotlib.ticker import MultipleLocator

from benchfit.data.response import FrequencyResponse
from benchfit.fitting.model import PlantModel

FREQ_LABEL = "Frequency (Hz)"


def model_of(obj: Any) -> PlantModel:
    """The PlantModel inside ``obj`` (a PlantModel, a fit result, or its dict)."""
    if isinstance(obj, PlantModel):
        return obj
    inner = getattr(obj, "model", None)
    if isinstance(inner, PlantModel):
        return inner
    if isinstance(obj, dict):
        return PlantModel.from_dict(obj)
    raise TypeError(f"expected a PlantModel or a fit result, got {type(obj).__name__}")


def dense_grid(f_min_hz: float, f_max_hz: float, per_decade: int = 200) -> np.ndarray:
    """Log-spaced frequencies (Hz) for drawing smooth model curves."""
    decades = max(np.log10(f_max_hz / f_min_hz), 0.1)
    return np.logspace(np.log10(f_min_hz), np.log10(f_max_hz), int(decades * per_decade) + 2)


def phase_near(h: np.ndarray, ref_deg: float) -> np.ndarray:
    """Unwrapped phase of ``h`` in degrees, shifted by a multiple of 360 so the first point is near ``ref_deg``."""
    ph = np.degrees(np.unwrap(np.angle(h)))
    return ph - 360.0 * np.round((ph[0] - ref_deg) / 360.0)


def phase_ticks(ax) -> None:
    """Phase axis ticks at multiples of 45° (90° or 180° when the range is large)."""
    lo, hi = ax.get_ylim()
    span = abs(hi - lo)
    step = 45.0 if span <= 360 else (90.0 if span <= 720 else 180.0)
    ax.yaxis.set_major_locator(MultipleLocator(step))


def symmetric_ylim(ax, values: np.ndarray, floor: float) -> None:
    """Y limits symmetric about zero, at least ±``floor``."""
    v = np.asarray(values, dtype=float)
    v = v[np.isfinite(v)]
    top = max(float(np.max(np.abs(v))) * 1.15 if v.size else 0.0, floor)
    ax.set_ylim(-top, top)


def sampled(loop: Any, f_min_hz: float, f_max_hz: float, per_decade: int = 200
            ) -> tuple[np.ndarray, np.ndarray]:
    """(freq_hz, complex values) of a response: a sweep's own points, or a model/callable on a dense grid."""
    if isinstance(loop, FrequencyResponse):
        return loop.freq_hz, loop.response
    f = dense_grid(f_min_hz, f_max_hz, per_decade)
    fn = loop.response if isinstance(loop, PlantModel) else loop
    return f, np.asarray(fn(f), dtype=complex)


def time_scale(t_max_s: float) -> tuple[float, str]:
    """(factor, unit) to show times in ns, µs, ms or s: plotted value = t · factor."""
    for factor, unit in ((1e9, "ns"), (1e6, "µs"), (1e3, "ms")):
        if t_max_s * factor < 2000:
            return factor, unit
    return 1.0, "s"
