"""Load-step traces: deviation, recovery and ringing, and the output-impedance prediction.

A load step changes the output current by ΔI at t_s; the output leaves its
level, peaks, and recovers (to the same level, or a slightly different one when
the regulator has droop).  Definitions:

- deviation: largest excursion of the (smoothed) output from its initial level
  after the step, signed (V);
- recovery time: from the step instant until the output stays within
  final ± band, where band is a fraction of |deviation| (default 2 %), never
  narrower than four smoothed-noise standard deviations, or given in volts;
- ringing frequency and log decrement from the lobes about the final level.

The prediction from a closed-loop output impedance Zcl is
v(t) = v0 − ΔI·z(t − t_s), with z the response of Zcl to a unit current step:
exact from a PlantModel, and from sampled data through
z(τ) = (2/π)∫₀^∞ Re Zcl(jω)·sin(ωτ)/ω dω (the step response of a causal system
from the real part of its frequency response, a standard Fourier-integral
result), integrated exactly for Re Zcl piecewise linear in ω between the
samples and constant beyond them.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
from scipy import special

from benchfit.data.response import FrequencyResponse
from benchfit.errors import InputError
from benchfit.fitting.model import PlantModel
from benchfit.provenance import Provenance
from benchfit.steps.features import (
    clipped_runs,
    difference_sigma,
    last_exit,
    make_smoother,
    robust_sigma,
    trace_arrays,
)
from benchfit.steps.lobes import ringing
from benchfit.steps.measure import MIN_PRE_SAMPLES, MIN_STEP_SIGMAS, TAIL_FRACTION
from benchfit.steps.models import rational_unit_step, zeta_from_log_decrement
from benchfit.steps.record import record_from_dict, record_to_dict

#: Most times at which the Fourier integral is evaluated directly (others interpolated).
_MAX_INTEGRAL_POINTS = 1500

@dataclass(frozen=True)
class LoadStepMeasurement:
    """What a load-step trace shows.

    Parameters
    ----------
    initial_v, final_v, shift_v
        Output level before and after the transient, and their difference (V, droop).
    step_time_s
        Load-step instant on the trace's time axis (s).
    deviation_v, peak_time_s
        Signed peak deviation from the initial level (V) and its time after the step (s).
    recovery_time_s, band_v
        Time after the step until the output stays within final ± band_v (s; NaN
        if never), and that band (V).
    ringing_freq_hz, log_decrement, zeta_from_decrement, lobes
        Ringing about the final level (NaN with too few lobes).
    noise_v, noise_source
        Noise standard deviation of the flat part before the step, and where it came from.
    current_step_a, peak_impedance_ohm
        ΔI when known (A) and |deviation|/|ΔI| (ohm); NaN otherwise.
    pre_step_samples, samples, sample_interval_s, smoothing_samples,
    clipped_samples, clipped_levels_v, channel, warnings, provenance
        As for :class:`~benchfit.steps.measure.StepMeasurement`.
    """

    initial_v: float
    final_v: float
    shift_v: float
    step_time_s: float
    deviation_v: float
    peak_time_s: float
    recovery_time_s: float
    band_v: float
    ringing_freq_hz: float
    log_decrement: float
    zeta_from_decrement: float
    lobes: int
    noise_v: float
    noise_source: str
    sample_interval_s: float
    current_step_a: float = float("nan")
    peak_impedance_ohm: float = float("nan")
    pre_step_samples: int = 0
    samples: int = 0
    smoothing_samples: int = 1
    clipped_samples: int = 0
    clipped_levels_v: tuple[float, ...] = ()
    channel: str = ""
    warnings: tuple[str, ...] = ()
    provenance: Provenance = field(default_factory=lambda: Provenance(step="measure_load_step"))

    def to_dict(self) -> dict[str, Any]:
        return record_to_dict(self, "load_step_measurement")

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> LoadStepMeasurement:
        return record_from_dict(cls, d, "load-step measurement")


def measure_load_step(data, *, channel: str | int | None = None, band: float = 0.02,
                      band_v: float | None = None, step_time_s: float | None = None,
                      current_step_a: float | None = None) -> LoadStepMeasurement:
    """Measure the output's response to a load step.

    Parameters
    ----------
    data
        A :class:`~benchfit.data.TimeTrace` or ``(time_s, samples)`` pair (output voltage).
    channel
        Channel name or 0-based index.
    band
        Recovery band as a fraction of |deviation| (0.02 = ±2 %).
    band_v
        Recovery band in volts (overrides ``band``).
    step_time_s
        The load-step instant when known; found from the trace otherwise.
    current_step_a
        ΔI in A (positive: more load current), for the peak impedance |ΔV|/|ΔI|.

    Raises
    ------
    InputError
        NaN samples, no transient, a transient too close to the end of the record.
    """
    t, y, name, source = trace_arrays(data, channel)
    n = y.size
    warnings: list[str] = []
    k_tail = max(5, int(round(TAIL_FRACTION * n)))
    sig_d = difference_sigma(y)
    y0 = float(np.median(y[: max(5, n // 50)]))
    size = float(np.max(np.abs(y - y0)))
    if size <= max(MIN_STEP_SIGMAS * sig_d * 2.0, 1e-9 * max(np.max(np.abs(y)), 1e-300)):
        raise InputError(f"channel {name!r}: no load transient found; the output stays within "
                         f"{size:.3g} V of its start level ({y0:.6g} V), about the noise ({sig_d:.3g} V); "
                         "expected a dip or bump after a load step", source=source)
    smoother = make_smoother(sig_d / size, n)
    ys = smoother(y)
    guard = smoother.width // 2 + 1
    dev0 = ys - y0
    size = float(np.max(np.abs(dev0)))
    sig_s = sig_d * smoother.gain
    if step_time_s is not None:
        if not t[0] <= step_time_s < t[-1]:
            raise InputError(f"step time {step_time_s:g} s lies outside the record", source="--step-time")
        i_s = int(np.searchsorted(t, step_time_s))
    else:
        i_big = int(np.argmax(np.abs(dev0) > 0.1 * size))
        quiet = np.flatnonzero(np.abs(dev0[: i_big + 1]) <= max(4.0 * sig_s, 2e-3 * size))
        i_s = int(quiet[-1]) if quiet.size else 0
    pre = y[: max(0, i_s - guard)]
    if pre.size >= MIN_PRE_SAMPLES:
        y0, noise = float(np.median(pre)), robust_sigma(pre)
        noise_source = f"flat part before the step ({pre.size} samples)"
    else:
        noise, noise_source = sig_d, "sample-to-sample differences (no flat part before the step)"
        warnings.append(f"only {pre.size} samples before the load step: initial level from the first "
                        "samples, noise from sample-to-sample differences")
    y1 = float(np.median(y[-k_tail:]))
    t_s = float(step_time_s) if step_time_s is not None else float(t[i_s])
    post = ys[i_s:] - y0
    j = int(np.argmax(np.abs(post)))
    deviation = float(post[j])
    i_pk = i_s + j
    if i_pk >= n - k_tail or (t[-1] - t_s) < 3.0 * (t[i_pk] - t_s):
        raise InputError(f"channel {name!r}: the load step at t = {t_s:.6g} s is too close to the end of the "
                         f"record (ends at {t[-1]:.6g} s); expected the output to recover to a flat level "
                         "well before the end (capture a longer record)", source=source)
    sig_s = noise * smoother.gain
    bv = abs(band_v) if band_v is not None else max(band * abs(deviation), 4.0 * sig_s)
    if band_v is None and bv > band * abs(deviation):
        warnings.append(f"recovery band widened to ±{bv:.3g} V (4x the smoothed noise); "
                        f"{100 * band:.3g} % of the deviation is inside the noise")
    t_rec, settled = last_exit(t, ys - y1, bv, i_s)
    if not settled:
        warnings.append(f"the output does not recover to within ±{bv:.3g} V before the record ends")
    if np.ptp(ys[-k_tail:]) > 2.0 * bv:
        warnings.append("the output still moves in the last 10 % of the record; the final level is uncertain")
    ring = ringing(t[i_s:], ys[i_s:] - y1, max(4.0 * sig_s, 1e-4 * abs(deviation)))
    zeta_dec = zeta_from_log_decrement(ring.log_decrement) if ring.log_decrement > 0 else float("nan")
    mask, levels = clipped_runs(y, ignore_levels=(y0, y1) if noise == 0 else ())
    if mask.any():
        warnings.append(f"{int(mask.sum())} samples sit in runs at the record's extreme "
                        f"{', '.join(f'{v:.6g} V' for v in levels)}: the scope probably clipped; the "
                        "deviation is at least what is shown")
    di = float("nan") if current_step_a is None else float(current_step_a)
    return LoadStepMeasurement(
        initial_v=y0, final_v=y1, shift_v=y1 - y0, step_time_s=t_s, deviation_v=deviation,
        peak_time_s=float(t[i_pk] - t_s), recovery_time_s=float(t_rec - t_s) if settled else float("nan"),
        band_v=float(bv), ringing_freq_hz=ring.freq_hz, log_decrement=ring.log_decrement,
        zeta_from_decrement=zeta_dec, lobes=len(ring.lobe_peaks), noise_v=float(noise),
        noise_source=noise_source, sample_interval_s=float(np.median(np.diff(t))),
        current_step_a=di, peak_impedance_ohm=abs(deviation) / abs(di) if di and np.isfinite(di) else float("nan"),
        pre_step_samples=int(pre.size), samples=int(n), smoothing_samples=smoother.width,
        clipped_samples=int(mask.sum()), clipped_levels_v=tuple(levels), channel=name,
        warnings=tuple(warnings),
        provenance=Provenance(step="measure_load_step", sources=(source,) if source else (),
                              settings={"channel": name, "band": band, "band_v": band_v,
                                        "step_time_s": step_time_s, "current_step_a": current_step_a}),
    )


# ----- prediction from the output impedance -------------------------------------------------
def step_from_frequency_response(freq_hz: np.ndarray, response: np.ndarray, tau: np.ndarray) -> np.ndarray:
    """Unit-step response of a causal system from samples of its frequency response.

    y(τ) = (2/π)∫₀^∞ Re H(jω)·sin(ωτ)/ω dω for τ > 0, with Re H linear in ω
    between samples, equal to its first sample below them and to its last
    above them; each piece is integrated exactly with the sine integral Si.
    Returns 0 for τ ≤ 0.
    """
    w = 2.0 * np.pi * np.asarray(freq_hz, float)
    r = np.real(np.asarray(response, complex))
    tau = np.asarray(tau, float)
    tp = np.clip(tau, 0.0, None)[:, None]
    si = special.sici(w[None, :] * tp)[0]            # Si(ω_i τ)
    co = np.cos(w[None, :] * tp)
    beta = np.diff(r) / np.diff(w)                    # slope of each piece
    alpha = r[:-1] - beta * w[:-1]
    with np.errstate(divide="ignore", invalid="ignore"):
        pieces = alpha * (si[:, 1:] - si[:, :-1]) + beta * (co[:, :-1] - co[:, 1:]) / tp
    pieces = np.where(tp > 0, pieces, 0.0)
    total = r[0] * si[:, 0] + pieces.sum(axis=1) + r[-1] * (np.pi / 2.0 - si[:, -1])
    return np.where(tau > 0, 2.0 / np.pi * total, 0.0)


def impedance_step(zout: PlantModel | FrequencyResponse, tau: np.ndarray) -> np.ndarray:
    """Voltage (V per A) across ``zout`` for a unit current step at τ = 0."""
    tau = np.asarray(tau, float)
    if isinstance(zout, PlantModel):
        return rational_unit_step(tau - zout.delay_s, zout.zeros, zout.poles, zout.k)
    if isinstance(zout, FrequencyResponse):
        if tau.size <= _MAX_INTEGRAL_POINTS:
            return step_from_frequency_response(zout.freq_hz, zout.response, tau)
        # The integral costs (samples x frequencies) sine integrals: evaluate it on a
        # subset of the times (keeping the first after the step) and interpolate.
        pos = np.flatnonzero(tau > 0)
        if pos.size == 0:
            return np.zeros_like(tau)
        sub = np.unique(np.concatenate([pos[:: max(1, pos.size // _MAX_INTEGRAL_POINTS)], pos[[0, -1]]]))
        ys = step_from_frequency_response(zout.freq_hz, zout.response, tau[sub])
        return np.where(tau > 0, np.interp(tau, tau[sub], ys), 0.0)
    raise InputError("output impedance must be a model or a frequency response")


def predict_load_step(time_s: np.ndarray, zout: PlantModel | FrequencyResponse, current_step_a: float,
                      initial_v: float, step_time_s: float) -> np.ndarray:
    """Predicted output v(t) = v0 − ΔI·z(t − t_s) for a load step ΔI (A) at ``step_time_s``."""
    return initial_v - current_step_a * impedance_step(zout, np.asarray(time_s, float) - step_time_s)
