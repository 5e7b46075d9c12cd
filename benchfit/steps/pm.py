"""Phase margin estimated from a step's damping ratio.

A closed loop that behaves like ωn²/(s² + 2ζωn s + ωn²) has the open loop
L(s) = ωn² / (s·(s + 2ζωn)).  Its crossover and phase margin follow exactly
(standard textbook result for that loop):

    ωc = ωn·√(√(1 + 4ζ⁴) − 2ζ²)
    PM = atan(2ζ / √(√(1 + 4ζ⁴) − 2ζ²))

The estimate is only as good as the second-order picture of the loop; the
rule of thumb PM ≈ 100·ζ degrees (common practice, no source) is reported
next to it because bench engineers quote it, and it drifts from the exact
relation above ζ ≈ 0.6.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from benchfit.provenance import Provenance
from benchfit.steps.record import record_from_dict, record_to_dict

RULE_OF_THUMB_NOTE = "PM ≈ 100·ζ degrees: rule of thumb (common practice, no source)"

#: A step that rises within fewer samples than this is not resolved: its shape, hence
#: ζ and fn, is not in the record (common practice, no source: a 10-90 % rise needs a
#: few samples to be drawn at all).
MIN_RISE_SAMPLES = 3.0


def zeta_not_determined(zeta: float, zeta_stderr: float, rise_time_s: float = float("nan"),
                        sample_interval_s: float = float("nan")) -> str:
    """Why a fitted ζ cannot carry a phase-margin estimate ("" when it can).

    Evidence weighed: the record's resolution of the edge (a 10-90 % rise within
    :data:`MIN_RISE_SAMPLES` samples does not show the step's shape) and the
    fit's own standard error (σ_ζ at or above ζ: the data do not locate ζ to
    within its own size).  A σ that is not known (NaN, e.g. a ζ from the log
    decrement) is not evidence either way.
    """
    if (math.isfinite(rise_time_s) and math.isfinite(sample_interval_s) and sample_interval_s > 0
            and rise_time_s < MIN_RISE_SAMPLES * sample_interval_s):
        return (f"the step rises within {rise_time_s / sample_interval_s:.2g} samples, so the record "
                "does not resolve its shape and ζ is not determined")
    if not math.isfinite(zeta) or zeta <= 0:
        return "no damping ratio was found"
    if math.isfinite(zeta_stderr) and zeta_stderr >= zeta:
        return (f"ζ = {zeta:.3g} ± {zeta_stderr:.2g}: its standard error is as large as ζ itself, "
                "so the trace does not determine it")
    return ""


def _root(zeta):
    z = np.asarray(zeta, dtype=float)
    return np.sqrt(np.sqrt(1.0 + 4.0 * z**4) - 2.0 * z**2)


def phase_margin_from_zeta(zeta: float | np.ndarray) -> float | np.ndarray:
    """Exact phase margin (degrees) of ωn²/(s(s+2ζωn)) for damping ratio ``zeta`` ≥ 0."""
    out = np.degrees(np.arctan2(2.0 * np.asarray(zeta, dtype=float), _root(zeta)))
    return float(out) if np.ndim(out) == 0 else out


def crossover_ratio_from_zeta(zeta: float | np.ndarray) -> float | np.ndarray:
    """ωc/ωn of ωn²/(s(s+2ζωn)): √(√(1+4ζ⁴) − 2ζ²)."""
    out = _root(zeta)
    return float(out) if np.ndim(out) == 0 else out


def zeta_from_phase_margin(pm_deg: float) -> float:
    """Inverse of :func:`phase_margin_from_zeta` for 0 < PM < 90 degrees.

    At crossover |L| = 1 gives cos PM = (ωc/ωn)² and sin PM = 2ζ·ωc/ωn, hence
    ζ = sin PM / (2·√cos PM).
    """
    if not 0.0 < pm_deg < 90.0:
        raise ValueError(f"phase margin must lie in (0, 90) degrees, found {pm_deg}")
    r = math.radians(pm_deg)
    return math.sin(r) / (2.0 * math.sqrt(math.cos(r)))


@dataclass(frozen=True)
class PhaseMarginEstimate:
    """Phase margin read from a step's ζ, with its uncertainty.

    Parameters
    ----------
    zeta, zeta_stderr
        Damping ratio the estimate is made from, and its standard error.
    phase_margin_deg, phase_margin_stderr_deg
        Exact second-order relation, and the standard error propagated from ζ.
    rule_of_thumb_deg
        100·ζ (common practice, no source).
    crossover_hz
        Crossover frequency of the equivalent loop ωn²/(s(s+2ζωn)), when fn is known.
    not_determined
        Why ζ cannot carry an estimate ("" when it can); then the phase margin,
        its σ, the rule-of-thumb figure and the crossover are NaN (JSON null).
    notes
        How to read the figures.
    provenance
        What produced it.
    """

    zeta: float
    zeta_stderr: float
    phase_margin_deg: float
    phase_margin_stderr_deg: float
    rule_of_thumb_deg: float
    crossover_hz: float
    notes: tuple[str, ...] = ()
    provenance: Provenance = field(default_factory=lambda: Provenance(step="phase_margin_estimate"))
    not_determined: str = ""

    @property
    def determined(self) -> bool:
        """True when the estimate is a figure (ζ was determined by the trace)."""
        return not self.not_determined

    def to_dict(self) -> dict[str, Any]:
        return record_to_dict(self, "phase_margin_estimate")

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> PhaseMarginEstimate:
        return record_from_dict(cls, d, "phase-margin estimate")


def estimate_phase_margin(zeta: float, zeta_stderr: float = float("nan"),
                          natural_freq_hz: float = float("nan"),
                          provenance: Provenance | None = None,
                          not_determined: str = "") -> PhaseMarginEstimate:
    """Phase-margin estimate from ζ (and fn for the crossover), with propagated error.

    Parameters
    ----------
    zeta
        Damping ratio from a step fit (> 0).
    zeta_stderr
        Its standard error (NaN when unknown).
    natural_freq_hz
        Natural frequency in Hz (NaN when unknown).
    not_determined
        Why ζ is not determined (:func:`zeta_not_determined`); when given, no
        figure is estimated and the reason is kept instead.
    """
    prov = provenance or Provenance(step="phase_margin_estimate",
                                    settings={"relation": "exact second order"})
    if not_determined:
        nan = float("nan")
        return PhaseMarginEstimate(zeta=float(zeta), zeta_stderr=float(zeta_stderr),
                                   phase_margin_deg=nan, phase_margin_stderr_deg=nan,
                                   rule_of_thumb_deg=nan, crossover_hz=nan,
                                   notes=(f"phase margin not determined: {not_determined}",),
                                   provenance=prov, not_determined=str(not_determined))
    pm = phase_margin_from_zeta(zeta)
    h = max(1e-6, 1e-4 * zeta)
    slope = (phase_margin_from_zeta(zeta + h) - phase_margin_from_zeta(max(zeta - h, 0.0))) \
        / (zeta + h - max(zeta - h, 0.0))
    notes = [
        "exact relation for the loop ωn²/(s(s+2ζωn)); valid as far as the closed loop is second order",
        RULE_OF_THUMB_NOTE,
    ]
    if zeta >= 1.0:
        notes.append("ζ ≥ 1: no overshoot; the margin is large and poorly resolved by a step")
    return PhaseMarginEstimate(
        zeta=float(zeta), zeta_stderr=float(zeta_stderr),
        phase_margin_deg=float(pm), phase_margin_stderr_deg=float(abs(slope) * zeta_stderr),
        rule_of_thumb_deg=100.0 * float(zeta),
        crossover_hz=float(natural_freq_hz * crossover_ratio_from_zeta(zeta)),
        notes=tuple(notes),
        provenance=prov,
    )
