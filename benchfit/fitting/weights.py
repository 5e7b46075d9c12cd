"""Per-point uncertainty of a measured response, and the weights the fit uses.

The fit works on the complex log of the response: ``ln|H|`` (nepers) and the
phase (rad).  Each point gets a standard deviation for both, from (first
match wins):

* the file's ``stddev`` column (σ of the complex response; a circular complex
  error spreads σ/√2 into each of the two log components),
* its ``coherence`` column (relative σ ∝ √((1−γ²)/γ²), Bendat & Piersol,
  *Random Data*, the standard FRF-estimate error), scaled by the scatter,
* its ``weight`` column (σ ∝ 1/weight), scaled by the scatter,
* otherwise the point-to-point scatter of the data itself.

A frequency column printed to a few significant digits (an analyzer export
that rounds a log sweep to 6 digits) puts a second error on every point: the
response was measured at a frequency up to half a unit of the last digit away
from the one written down.  Where the response moves fast (a Q-20 resonance
turns the phase by 2Q rad per neper of frequency) that error dwarfs the
printed gain and phase digits; :func:`frequency_sigma` gives its σ and
:func:`point_sigma` adds slope × σ_f in quadrature, so the fit does not add
phantom pole/zero pairs to chase it.

A coherence or weight column is used only when it explains the scatter at
least as well as the running scatter estimate does (likelihood of the third
differences); otherwise the scatter wins and the source says so.

The scatter is the spread of third differences (for white noise,
var(x[k+2] − 3x[k+1] + 3x[k] − x[k−1]) = 20σ²; third differences cancel the
curvature a sparse sweep shows), taken in a running window so a noise floor
that rises where the response is small is followed: a running median first
(robust to glitches and curvature), then the running mean square of the
third differences clipped at three times that median (for Gaussian noise
the median absolute deviation has an asymptotic efficiency of about 37 %
against the mean square, e.g. P. J. Huber and E. M. Ronchetti, *Robust
Statistics*, 2nd ed., 2009 — value from memory; so the window's σ wanders
far less).  One σ for the whole sweep replaces the running one unless the
running one explains the third differences better by more than Schwarz's
penalty for its freedom.  All of it is relative: multiplying the data by a
constant changes no weight.
"""

from __future__ import annotations

from dataclasses import dataclass
from math import erf, erfc

import numpy as np
from scipy import ndimage

from benchfit.errors import FitError

#: Smallest relative σ allowed (numerical precision of measured data, ~1e-9 dB).
SIGMA_MIN = 1e-10
#: A notch deeper than this fraction of the running median magnitude gets no extra weight.
NOTCH_FLOOR = 0.1
_MAD = 1.4826


@dataclass(frozen=True)
class PointSigma:
    """Per-point σ of ln|H| (nepers) and phase (rad), and where it came from."""

    mag: np.ndarray
    phase: np.ndarray
    source: str

    @property
    def floor_db(self) -> float:
        """rms σ of the magnitude in dB (the noise floor the residual is compared to)."""
        return float(20.0 / np.log(10.0) * np.sqrt(np.mean(self.mag ** 2)))

    @property
    def floor_deg(self) -> float:
        """rms σ of the phase in degrees."""
        return float(np.degrees(np.sqrt(np.mean(self.phase ** 2))))


def _window(n: int) -> int:
    """Running-window length: a sixth of the sweep (at least 21 points), odd.

    A sixth rather than a tenth, with the clipped mean square: for a floor
    rising fourfold over 401 points the running estimate stays within
    0.77..1.23 of the truth (5th..95th percentile), against 0.65..1.46 for the
    running median over a tenth, and still follows the rise to about 10 %
    (``benchmarks/noise_sigma.py``; the older figures at commit 75ff9dc).
    """
    w = max(21, n // 6)
    w = min(w, n)
    return w if w % 2 else max(w - 1, 1)


#: Third differences beyond this many running-median σ are clipped in the mean square.
CLIP = 3.0
#: E[min(z², CLIP²)] for a standard normal z (second moment of the normal truncated at
#: ±CLIP, plus CLIP² times the tail probability): the clipped mean square's bias.
_CLIP_MEAN = float((erf(CLIP / np.sqrt(2.0)) - 2.0 * CLIP * np.exp(-0.5 * CLIP * CLIP)
                    / np.sqrt(2.0 * np.pi)) + CLIP * CLIP * erfc(CLIP / np.sqrt(2.0)))


def scatter_sigma(x: np.ndarray, rel: np.ndarray | None = None) -> np.ndarray:
    """σ of a real sequence from its third differences: one value, or a running one.

    Parameters
    ----------
    x
        The sequence (ln|H| or unwrapped phase).
    rel
        Optional known relative σ shape; the scatter then fixes only its scale.
    """
    n = x.shape[0]
    if n < 5:  # fewer than two third differences: the padding below would come out short
        return np.full(n, SIGMA_MIN)
    d3 = np.abs(_diff3(x)) / np.sqrt(20.0)
    if rel is not None:
        r = rel[1:-2]
        scale = _MAD * np.median(d3 / r)
        return np.maximum(scale * rel, SIGMA_MIN)
    d3 = np.concatenate([d3[:1], d3, d3[-2:]])
    win = _window(n)
    # "mirror", not "nearest": padding by repeating the end value would make half
    # of an end window one sample, so the ends' σ was one third difference's luck.
    glob = _MAD * np.median(d3)
    # A local estimate far below the global one is curvature luck, not a quieter meter.
    med = np.maximum(_MAD * ndimage.median_filter(d3, size=win, mode="mirror"), 0.3 * glob)
    clipped = np.minimum(d3, CLIP * med) ** 2
    local = np.maximum(np.sqrt(ndimage.uniform_filter1d(clipped, size=win, mode="mirror")
                               / _CLIP_MEAN), 0.3 * glob)
    flat = np.full(n, np.sqrt(np.mean(np.minimum(d3, CLIP * glob) ** 2) / _CLIP_MEAN))
    # One σ for the whole sweep unless the running one explains the third
    # differences better by more than Schwarz's penalty for its freedom (about
    # one value per window): with a flat floor the running estimate's wander
    # only mis-weights points.
    k = max(n / win - 1.0, 1.0)
    if _loglik(x, local) - _loglik(x, flat) <= 0.5 * k * np.log(n):
        local = flat
    return np.maximum(local, SIGMA_MIN)


#: Most significant digits a frequency column is tested for: a column that needs more is
#: taken as printed at full precision (no rounding error to add).
MAX_PRINTED_DIGITS = 12


def printed_digits(freq_hz: np.ndarray) -> int | None:
    """Fewest significant digits that reproduce every frequency of the column, or None.

    None means no count up to :data:`MAX_PRINTED_DIGITS` does: the column is full
    precision.  Values are compared to their rounded selves within 1e-12 relative.
    """
    f = np.abs(np.asarray(freq_hz, dtype=float))
    f = f[np.isfinite(f) & (f > 0)]
    if f.size == 0:
        return None
    exp10 = np.floor(np.log10(f))

    def fits(d: int, idx) -> bool:
        unit = 10.0 ** (exp10[idx] - d + 1)
        return bool(np.all(np.abs(np.round(f[idx] / unit) * unit - f[idx]) <= 1e-12 * f[idx]))

    # a few values spread over the column rule most counts out; the whole column confirms
    some = np.unique(np.linspace(0, f.size - 1, min(f.size, 16)).astype(int))
    for d in range(1, MAX_PRINTED_DIGITS + 1):
        if fits(d, some) and fits(d, slice(None)):
            return d
    return None


#: A printed column reads as a rounded sweep only where its rounding unit is below this
#: fraction of the spacing between points; coarser digits (an E6 list, 100/200/300 Hz)
#: are the frequencies the instrument was set to (common practice, no source).
ROUNDED_GRID_SPACING = 0.05


def frequency_sigma(freq_hz: np.ndarray) -> np.ndarray:
    """σ (Hz) of each frequency from the rounding of a printed column; zeros when exact.

    Evidence weighed: the column reads as a regular sweep rounded to ``d``
    significant digits when (a) :func:`printed_digits` finds ``d``; (b) one unit
    of the ``d``-th digit is below :data:`ROUNDED_GRID_SPACING` of the spacing to
    the neighbouring points everywhere (digits that fine cannot be the set
    values of a sweep that coarse, they are a finer value written short); and
    (c) the column departs from the straight log (or linear) grid through its
    points by no more than one unit anywhere, and by something somewhere.  Then
    each frequency carries the error of rounding, uniform over one unit:
    σ = unit/√12.  A column that *is* its grid exactly, or is no regular grid
    (points placed by an adaptive capture), is taken as the frequencies the
    instrument was set to: σ 0.
    """
    f = np.asarray(freq_hz, dtype=float)
    zero = np.zeros_like(f)
    d = printed_digits(f)
    if d is None or f.size < 4 or np.any(~np.isfinite(f)) or np.any(f <= 0):
        return zero
    unit = 10.0 ** (np.floor(np.log10(f)) - d + 1)
    gap = np.abs(np.diff(f))
    spacing = np.minimum(np.r_[gap[0], gap], np.r_[gap, gap[-1]])
    if not np.all(unit < ROUNDED_GRID_SPACING * spacing):
        return zero
    k = np.arange(f.size, dtype=float)
    for grid in (np.exp(np.polyval(np.polyfit(k, np.log(f), 1), k)),
                 np.polyval(np.polyfit(k, f, 1), k)):
        dev = np.abs(f - grid)
        # one unit, not half: the grid is fitted to the rounded points, so it is itself
        # off by a part of a unit where the unit is smallest (just below a decade)
        if np.all(dev <= unit) and np.any(dev > 1e-3 * unit):
            return unit / np.sqrt(12.0)
    return zero


def point_sigma(h: np.ndarray, stddev=None, coherence=None, weight=None,
                freq_hz: np.ndarray | None = None) -> PointSigma:
    """σ of ln|H| and of phase per point (see module docstring).

    Parameters
    ----------
    h
        Complex response.
    stddev, coherence, weight
        Optional per-point columns of the file (first match wins).
    freq_hz
        The frequency column; when given and rounded (:func:`frequency_sigma`), the
        response's slope times the frequency's σ is added in quadrature.

    Raises
    ------
    FitError
        When the given stddev/coherence/weight column has no usable value.
    """
    ps = _data_sigma(h, stddev, coherence, weight)
    if freq_hz is None:
        return ps
    f = np.asarray(freq_hz, dtype=float)
    sf = frequency_sigma(f)
    if not np.any(sf > 0) or f.size < 3:
        return ps
    h = np.asarray(h, dtype=complex)
    lnf = np.log(f)
    rel_f = sf / f  # σ of ln f
    slope_m = np.gradient(np.log(np.abs(h)), lnf)
    slope_p = np.gradient(np.unwrap(np.angle(h)), lnf)
    return PointSigma(np.hypot(ps.mag, slope_m * rel_f), np.hypot(ps.phase, slope_p * rel_f),
                      ps.source + " + rounded frequencies")


def _data_sigma(h: np.ndarray, stddev=None, coherence=None, weight=None) -> PointSigma:
    """σ of ln|H| and phase from the response's own columns or scatter (module docstring)."""
    h = np.asarray(h, dtype=complex)
    mag = np.abs(h)
    if np.any(mag == 0):
        raise FitError("the response is exactly zero at some points; the log fit needs |H| > 0 "
                       "(restrict --band or remove those points)")
    lnm = np.log(mag)
    ph = np.unwrap(np.angle(h))
    if stddev is not None:
        sd = np.asarray(stddev, dtype=float)
        ok = np.isfinite(sd) & (sd > 0)
        if not np.any(ok):
            raise FitError("the stddev column holds no finite positive value")
        sd = np.where(ok, sd, np.max(sd[ok]) * 1e3)
        rel = np.maximum(sd / (np.sqrt(2.0) * mag), SIGMA_MIN)
        return PointSigma(rel, rel.copy(), "stddev")
    shape = None
    if coherence is not None:
        g = np.asarray(coherence, dtype=float)
        ok = np.isfinite(g) & (g > 0)
        if not np.any(ok):
            raise FitError("the coherence column holds no finite positive value")
        g = np.clip(np.where(ok, g, 1e-6), 1e-6, 1.0 - 1e-9)
        shape, source = np.sqrt((1.0 - g) / g), "coherence"
    elif weight is not None:
        wt = np.asarray(weight, dtype=float)
        ok = np.isfinite(wt) & (wt > 0)
        if not np.any(ok):
            raise FitError("the weight column holds no finite positive value")
        shape, source = 1.0 / np.where(ok, wt, np.min(wt[ok]) * 1e-3), "weight"
    plain = PointSigma(scatter_sigma(lnm), scatter_sigma(ph), "scatter")
    if shape is not None:
        given = PointSigma(scatter_sigma(lnm, shape), scatter_sigma(ph, shape), source)
        # Use the column only when it explains the data's scatter at least as well
        # (Gaussian likelihood of the third differences): a coherence column
        # unrelated to the actual noise would otherwise mis-weight the fit.
        if _loglik(lnm, given.mag) + _loglik(ph, given.phase) >= \
                _loglik(lnm, plain.mag) + _loglik(ph, plain.phase):
            return given
        return PointSigma(plain.mag, plain.phase, f"scatter ({source} column did not match it)")
    return plain


def _diff3(x: np.ndarray) -> np.ndarray:
    """Third differences x[k+2] − 3x[k+1] + 3x[k] − x[k−1] (blind to curvature)."""
    return x[3:] - 3.0 * x[2:-1] + 3.0 * x[1:-2] - x[:-3]


def _loglik(x: np.ndarray, sig: np.ndarray) -> float:
    """Gaussian log-likelihood of the third differences of ``x`` given per-point σ."""
    if x.shape[0] < 4:
        return 0.0
    d3 = _diff3(x)
    var = sig[:-3] ** 2 + 9.0 * sig[1:-2] ** 2 + 9.0 * sig[2:-1] ** 2 + sig[3:] ** 2
    z2 = np.minimum(d3 * d3 / var, 25.0)  # clip outliers (curvature, glitches)
    return float(-0.5 * np.sum(np.log(var) + z2))


def vf_weight(h: np.ndarray, sigma: PointSigma, weighting: str = "relative",
              stddev=None) -> np.ndarray:
    """Weight of each point's complex error in vector fitting.

    ``relative``: 1 / (|H|·σ_rel), with |H| floored at :data:`NOTCH_FLOOR` of
    its running median so notches and the noise floor cannot dominate.
    ``absolute``: 1 / stddev when given, else 1 (plain complex error).
    The result is normalised to a maximum of 1.
    """
    mag = np.abs(np.asarray(h, dtype=complex))
    if weighting == "absolute":
        w = 1.0 / np.asarray(stddev, dtype=float) if stddev is not None else np.ones_like(mag)
        w = np.where(np.isfinite(w) & (w > 0), w, 0.0)
    else:
        n = mag.shape[0]
        lm = np.log(mag)
        run = np.exp(ndimage.median_filter(lm, size=min(n, max(5, n // 50) | 1), mode="nearest"))
        floored = np.maximum(mag, NOTCH_FLOOR * run)
        rel = np.sqrt(0.5 * (sigma.mag ** 2 + sigma.phase ** 2))
        w = 1.0 / (floored * rel)
    top = np.max(w)
    if not np.isfinite(top) or top <= 0:
        raise FitError("no point has a usable weight")
    return w / top
