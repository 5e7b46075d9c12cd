"""Model-free measurements of a step response on a scope trace.

Definitions (all times from the step instant unless said otherwise):

- initial / final level: median of the flat part before the step / of the last
  10 % of the record (robust statistics over windows, never single samples);
- step instant: the last sample before the 10 % crossing at which the
  (smoothed) output is still within the noise of the initial level, unless
  given;
- rise time: first 10 % crossing to first 90 % crossing of the step;
- overshoot: peak beyond the final level, % of the step, the peak from a
  polynomial fitted to the raw samples of the lobe's upper half (the maximum
  of noisy samples is biased high); undershoot: largest
  excursion past the initial level against the step's direction before the
  90 % crossing (a non-minimum-phase dip), % of the step;
- settling time: when the output last leaves final ± band (default 2 % of the step);
- ringing frequency and log decrement from the lobes about the final level;
- noise: robust standard deviation of the flat part before the step.

Noisy records are smoothed with a Savitzky-Golay window just wide enough that
the smoothed noise is 0.2 % of the step; the width used is reported.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from benchfit.errors import InputError
from benchfit.provenance import Provenance
from benchfit.steps.features import (
    clipped_runs,
    difference_sigma,
    first_crossing,
    last_exit,
    make_smoother,
    robust_sigma,
    trace_arrays,
)
from benchfit.steps.lobes import fitted_peak, ringing
from benchfit.steps.models import zeta_from_log_decrement
from benchfit.steps.record import record_from_dict, record_to_dict

#: Fraction of the record whose median is the final level.
TAIL_FRACTION = 0.10
#: A step smaller than this many noise standard deviations is "no step".
MIN_STEP_SIGMAS = 8.0
#: Fewest samples before the step for the noise estimate to come from there.
MIN_PRE_SAMPLES = 10

@dataclass(frozen=True)
class StepMeasurement:
    """What a step trace shows, without any model.

    Parameters
    ----------
    initial_v, final_v, step_v
        Levels before and after the step, and their difference (V).
    step_time_s
        Step instant on the trace's time axis (s).
    overshoot_pct, undershoot_pct
        Peak beyond the final level, and dip against the step direction, in % of |step|.
    peak_v, peak_time_s
        Level at the peak, and its time after the step instant (s).
    rise_time_s, t10_s, t90_s
        10–90 % rise time, and the two crossing times on the trace's axis (s).
    settling_time_s
        Time after the step instant until the output stays within final ± band (s);
        NaN when it never does within the record.
    band
        Settling band as a fraction of |step|.
    ringing_freq_hz, log_decrement, zeta_from_decrement
        Ringing about the final level (NaN when there are too few lobes), the log
        decrement per full period, and the ζ it implies for a second-order response.
    lobes
        Number of ringing lobes found above the noise.
    noise_v, noise_source
        Noise standard deviation (V) and where it was estimated.
    pre_step_samples, samples, sample_interval_s
        Samples before the step, in the record, and the median sample interval.
    smoothing_samples
        Savitzky-Golay window used for the crossings (1: none).
    clipped_samples, clipped_levels_v
        Samples in runs of identical extreme values (probable clipping) and those values.
    channel
        Channel measured.
    peak_method
        How the peak (and so the overshoot) was found: a polynomial fitted to
        the raw samples of the lobe's upper half (unbiased on noise), or the
        smoothed maximum when the lobe has too few samples
        (:func:`benchfit.steps.lobes.fitted_peak`).
    warnings
        Anything that makes a figure less trustworthy.
    provenance
        Source file and settings.
    """

    initial_v: float
    final_v: float
    step_v: float
    step_time_s: float
    overshoot_pct: float
    undershoot_pct: float
    peak_v: float
    peak_time_s: float
    rise_time_s: float
    t10_s: float
    t90_s: float
    settling_time_s: float
    band: float
    ringing_freq_hz: float
    log_decrement: float
    zeta_from_decrement: float
    lobes: int
    noise_v: float
    noise_source: str
    pre_step_samples: int
    samples: int
    sample_interval_s: float
    smoothing_samples: int
    clipped_samples: int = 0
    clipped_levels_v: tuple[float, ...] = ()
    channel: str = ""
    peak_method: str = ""
    warnings: tuple[str, ...] = ()
    provenance: Provenance = field(default_factory=lambda: Provenance(step="measure_step"))

    def to_dict(self) -> dict[str, Any]:
        return record_to_dict(self, "step_measurement")

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> StepMeasurement:
        return record_from_dict(cls, d, "step measurement")


def _levels(y, i_step, guard):
    """Initial level, noise and their source from the samples before the step."""
    pre = y[: max(0, i_step - guard)]
    if pre.size >= MIN_PRE_SAMPLES:
        y0 = float(np.median(pre))
        return y0, robust_sigma(pre), f"flat part before the step ({pre.size} samples)", pre.size
    head = y[: max(1, min(5, i_step + 1))]
    return float(np.median(head)), float("nan"), "", pre.size


def _locate(t, y, ys, y0, y1, sig_d, smoother, step_time_s, k_tail, name, source):
    """Step index, levels and noise: rough levels -> step instant -> flat-part levels, twice."""
    guard = smoother.width // 2 + 1
    noise = sig_d
    noise_source = "sample-to-sample differences (no flat part before the step)"
    pre_n = 0
    i_s = int(np.searchsorted(t, step_time_s)) if step_time_s is not None else 0
    for _ in range(2):
        u = (ys - y0) / (y1 - y0)
        if step_time_s is None:
            i_s = _step_index(u, noise * smoother.gain / abs(y1 - y0))
        y0, pre_sigma, src, pre_n = _levels(y, i_s, guard)
        if src:
            noise, noise_source = pre_sigma, src
        y1 = float(np.median(y[-k_tail:]))
        _check_step(y0, y1, noise if noise > 0 else sig_d, y, name, source)
    return i_s, y0, y1, noise, noise_source, pre_n


def measure_step(data, *, channel: str | int | None = None, band: float = 0.02,
                 band_v: float | None = None, step_time_s: float | None = None) -> StepMeasurement:
    """Measure a step response (reference step or any step-like transition).

    Parameters
    ----------
    data
        A :class:`~benchfit.data.TimeTrace` or a ``(time_s, samples)`` pair.
    channel
        Channel name or 0-based index (default: the first).
    band
        Settling band as a fraction of |step| (0.02 = ±2 %).
    band_v
        Settling band in volts; overrides ``band`` when given.
    step_time_s
        The step instant when known (e.g. the trigger at t = 0); found from the trace otherwise.

    Raises
    ------
    InputError
        NaN samples, no step (flat trace), a step too close to the end of the record.
    """
    t, y, name, source = trace_arrays(data, channel)
    n = y.size
    warnings: list[str] = []
    if not 0 < band < 1:
        raise InputError(f"settling band {band!r} must lie between 0 and 1 (a fraction of the step)",
                         source="--band")
    sig_d = difference_sigma(y)
    k_tail = max(5, int(round(TAIL_FRACTION * n)))
    y0 = float(np.median(y[: max(5, n // 50)]))
    y1 = float(np.median(y[-k_tail:]))
    _check_step(y0, y1, sig_d, y, name, source)

    given = step_time_s is not None
    if given and not t[0] <= step_time_s < t[-1]:
        raise InputError(f"step time {step_time_s:g} s lies outside the record "
                         f"({t[0]:g}..{t[-1]:g} s)", source="--step-time")
    dt = float(np.median(np.diff(t)))
    max_width = None
    for _ in range(2):  # a second pass when the smoothing window is as wide as the edge itself
        smoother = make_smoother(sig_d / abs(y1 - y0), n, max_width=max_width)
        ys = smoother(y)
        i_s, y0, y1, noise, noise_source, pre_n = _locate(t, y, ys, y0, y1, sig_d, smoother,
                                                         step_time_s, k_tail, name, source)
        step = y1 - y0
        u = (ys - y0) / step
        t10 = first_crossing(t, u, 0.1, i_s)
        t90 = first_crossing(t, u, 0.9, i_s)
        edge = max(int((t90 - t10) / dt) // 2, 1) if np.isfinite(t90 - t10) else 1
        if smoother.width <= edge:
            break
        max_width = edge
    if pre_n < MIN_PRE_SAMPLES:
        warnings.append(f"only {pre_n} samples before the step: initial level from the first samples, "
                        "noise from sample-to-sample differences")
    rel_noise = noise * smoother.gain / abs(step)  # smoothed noise, fraction of the step
    t_s = float(step_time_s) if given else step_instant(t, u, i_s, t10, rel_noise)
    i90 = int(np.searchsorted(t, t90)) if np.isfinite(t90) else n
    if not np.isfinite(t90) or i90 >= n - k_tail or (t[-1] - t_s) < 1.5 * (t90 - t_s):
        raise InputError(
            f"channel {name!r}: the step at t = {t_s:.6g} s is too close to the end of the record "
            f"(ends at {t[-1]:.6g} s); expected a settled flat part after the step, several rise "
            "times long (capture a longer record or move the trigger earlier)", source=source)
    tail = ys[-k_tail:]
    if np.ptp(tail) > 0.1 * abs(step):  # still swinging: there is no final level to measure against
        raise InputError(
            f"channel {name!r}: the output still swings by {100 * np.ptp(tail) / abs(step):.3g} % of the "
            f"step in the last 10 % of the record: the step at t = {t_s:.6g} s is too close to the end "
            "of the record (capture a longer record or move the trigger earlier)", source=source)
    if np.ptp(tail) > max(2.0 * band * abs(step), 8.0 * rel_noise * abs(step)):
        warnings.append("the output still moves in the last 10 % of the record; the final level "
                        "(and everything relative to it) is uncertain")

    post = u[i_s:]
    # the smoother's last half-window extrapolates (Savitzky-Golay at the record's end): no peak there
    end = n - smoother.width // 2 if smoother.width > 1 else n
    pk = fitted_peak(t[i_s:end], (y[i_s:end] - y0) / step, u[i_s:end], level=1.0)
    # The largest of N noise samples is about σ·√(2 ln N): anything below that is noise.
    floor = rel_noise * (1.0 + math.sqrt(2.0 * math.log(max(post.size, 2))))
    over = pk.value - 1.0
    overshoot = 100.0 * over if over > floor else 0.0
    dip = -float(np.min(u[i_s:i90 + 1]))
    undershoot = 100.0 * dip if dip > floor else 0.0
    peak_time = float(pk.time_s - t_s)

    band_frac = band if band_v is None else abs(band_v) / abs(step)
    if band_frac <= floor:
        warnings.append(f"settling band ±{100 * band_frac:.3g} % is within the noise "
                        f"({100 * rel_noise:.3g} % of the step after smoothing); settling time unreliable")
    t_set, settled = last_exit(t, u - 1.0, band_frac, i_s)
    if not settled:
        warnings.append(f"the output does not stay within ±{100 * band_frac:.3g} % before the record ends")
    ring = ringing(t[i_s:], post - 1.0, max(floor, 1e-4), noise=rel_noise,
                   raw=(y[i_s:] - y0) / step - 1.0)
    zeta_dec = zeta_from_log_decrement(ring.log_decrement) if ring.log_decrement > 0 else float("nan")

    mask, levels = clipped_runs(y, ignore_levels=(y0, y1) if noise == 0 else ())
    if mask.any():
        first = float(t[np.flatnonzero(mask)[0]])
        warnings.append(f"{int(mask.sum())} samples sit in runs at the record's extreme "
                        f"{', '.join(f'{v:.6g} V' for v in levels)} (from t = {first:.6g} s): the scope "
                        "probably clipped; levels and overshoot near them are unreliable")
    return StepMeasurement(
        initial_v=y0, final_v=y1, step_v=step, step_time_s=t_s,
        overshoot_pct=float(overshoot), undershoot_pct=float(undershoot),
        peak_v=float(y0 + step * pk.value), peak_time_s=peak_time,
        rise_time_s=float(t90 - t10), t10_s=t10, t90_s=t90,
        settling_time_s=float(t_set - t_s) if settled else float("nan"), band=float(band_frac),
        ringing_freq_hz=ring.freq_hz, log_decrement=ring.log_decrement, zeta_from_decrement=zeta_dec,
        lobes=len(ring.lobe_peaks), noise_v=float(noise), noise_source=noise_source,
        pre_step_samples=int(pre_n), samples=int(n), sample_interval_s=dt,
        smoothing_samples=smoother.width, clipped_samples=int(mask.sum()),
        clipped_levels_v=tuple(levels), channel=name, peak_method=pk.method,
        warnings=tuple(warnings),
        provenance=Provenance(step="measure_step", sources=(source,) if source else (),
                              settings={"channel": name, "band": band, "band_v": band_v,
                                        "step_time_s": step_time_s}),
    )


def _check_step(y0, y1, sigma, y, name, source):
    scale = max(float(np.max(np.abs(y))), 1e-300)
    if abs(y1 - y0) > max(MIN_STEP_SIGMAS * sigma, 1e-9 * scale):
        return
    # No level change start to end: is there a late edge, or nothing at all?
    away = np.abs(y - y0) > max(MIN_STEP_SIGMAS * sigma, 1e-9 * scale)
    runs = np.convolve(away.astype(int), np.ones(5, int), mode="valid") == 5
    n = y.size
    if runs.any():
        i = int(np.flatnonzero(runs)[0])
        if i >= n - 2 * max(5, int(round(TAIL_FRACTION * n))):
            raise InputError(
                f"channel {name!r}: the step starts at sample {i + 1} of {n}, too close to the end of "
                "the record; expected a settled flat part after the step (capture a longer record "
                "or move the trigger earlier)", source=source)
        raise InputError(
            f"channel {name!r}: the trace leaves its start level ({y0:.6g}) and comes back to it; "
            "expected a step from one level to another (for a load step use the load-step mode)",
            source=source)
    raise InputError(
        f"channel {name!r}: no step found; the start ({y0:.6g}) and end ({y1:.6g}) levels differ by "
        f"{abs(y1 - y0):.3g}, less than {MIN_STEP_SIGMAS:g}x the noise ({sigma:.3g}); expected a "
        "trace that steps from one level to another", source=source)


#: The power-law start is read at three levels a factor STEP_LEVEL_RATIO apart, the lowest at
#: max(4σ, 0.2 %) of the step (the threshold of :func:`_step_index`).
STEP_LEVEL_RATIO = 4.0
#: ... and the highest at most this fraction of the step (the leading power of the start holds
#: best low down; a noisier record gets a smaller ratio, at least 1.5).
STEP_TOP_LEVEL = 0.08


def step_instant(t: np.ndarray, u: np.ndarray, i_s: int, t10: float, rel_noise: float) -> float:
    """The step instant, extrapolated back from how the output leaves its initial level.

    Any linear response starts as a power of the time since the step, u ≈ c·(t − t0)^r
    (r the relative degree: 1 for a single pole, 2 for a second-order step).  Its
    crossings t1, t2, t3 of three levels L, qL, q²L (q = :data:`STEP_LEVEL_RATIO`, L =
    max(4σ, 0.2 %) of the step, all below 10 %) then satisfy (t2 − t0)/(t1 − t0) =
    (t3 − t0)/(t2 − t0), so t0 = (t1·t3 − t2²)/(t1 + t3 − 2·t2) whatever c and r are
    (q is lowered so that q²L stays within :data:`STEP_TOP_LEVEL`).
    Evidence weighed: the three crossings of the smoothed output; the estimate is kept
    when the crossings are distinct and below the 10 % crossing and t0 lies inside the
    record no further before t1 than t3 − t1; otherwise
    the last quiet sample ``t[i_s]`` (the older, late-by-a-few-samples reading) is returned.
    """
    fallback = float(t[i_s])
    lo = max(4.0 * rel_noise, 2e-3)
    q = min(STEP_LEVEL_RATIO, math.sqrt(STEP_TOP_LEVEL / lo))  # the top level stays at 8 % or below
    if q < 1.5:
        return fallback
    levels = [lo, lo * q, lo * q * q]
    t1, t2, t3 = (first_crossing(t, u, lv, i_s) for lv in levels)
    if not (np.isfinite([t1, t2, t3]).all() and t1 < t2 < t3 <= t10):
        return fallback
    den = t1 + t3 - 2.0 * t2
    if not den > 0:   # not a power law with r >= 1 (e.g. a noise-driven or concave start)
        return fallback
    t0 = (t1 * t3 - t2 * t2) / den
    if not (max(float(t[0]), t1 - (t3 - t1)) <= t0 <= t1):   # a start no slower than (t − t0)^4
        return fallback
    return float(t0)


def _step_index(u: np.ndarray, rel_noise: float) -> int:
    """Last sample before the first 10 % crossing still within the noise of the start level."""
    above = np.flatnonzero(u >= 0.1)
    i10 = int(above[0]) if above.size else u.size - 1
    thr = max(4.0 * rel_noise, 2e-3)
    quiet = np.flatnonzero(np.abs(u[: i10 + 1]) <= thr)
    return int(quiet[-1]) if quiet.size else 0
