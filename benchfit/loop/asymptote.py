"""The low-frequency asymptote of a sampled loop gain: how many integrators, and how sure.

A loop gain with ``n`` poles at s = 0 behaves below its lowest corner as

    ln T(jω) = c − n·ln(jω) + a1·(jω) + a2·(jω)² + a3·(jω)³ + …

with c = ln K (K real, so ∠K is 0° or 180°) and real a_k (the Taylor series
of ln of the rest of the loop; a pure delay τ adds −τ to a1).  Split into
real and imaginary parts this is two *linear* models,

    ln|T| = A − n·ln ω + b2·u²          (even powers of u = ω/ω_top)
    ∠T    = B + b1·u + b3·u³            (odd powers; B = ∠K − n·90°)

so the magnitude slope and the phase decide n *together*: the slope gives
n, and the constant phase B must be a multiple of 90° of the same parity.
:func:`fit_asymptote` fits them over the lowest decade of the sweep (or
more, when the lowest decade holds fewer than :data:`MIN_POINTS` points) and
:func:`choose_integrators` weighs every whole n against the free fit.  When
no single n is clearly the best, the sweep cannot decide; the margins code
then gives a verdict only if every plausible n gives the same one.

Used by :func:`benchfit.loop.margins.margins_from_data` and
:func:`benchfit.loop.marginsbatch.margins_batch` (for the rows of a Monte
Carlo that have no model to count integrators from).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

#: the fit window: at least this many decades from the bottom of the band
WINDOW_DECADES = 1.0
#: and at least this many points (widened upwards until reached)
MIN_POINTS = 12
#: floor of the fitted scatter, in nepers and radians (1e-4: 0.0009 dB, 0.006 deg), so that
#: noiseless computed sweeps are judged against a noise no measurement beats (our own figure)
NOISE_FLOOR = 1e-4
#: a free slope (in units of 20 dB/decade) this close to a whole n does not open its neighbours
#: when no n fits (0.4 dB/decade; our own figure)
SLOPE_SNAP = 0.02
#: integrator counts weighed
MAX_INTEGRATORS = 4
#: χ² (in units of the free fit's own scatter) by which the best whole n must beat the
#: next one to count as decided: a likelihood ratio of e^(10/2) ≈ 150 (our own threshold)
DECIDE_CHI2 = 10.0
#: χ² above the free fit that the best whole n may cost and still be the asymptote:
#: 99.9 % point of χ² with 2 degrees of freedom (n and B fixed instead of free), 13.8
ACCEPT_CHI2 = 13.8


@dataclass(frozen=True)
class Asymptote:
    """What the low end of one sweep says about its integrators.

    Attributes
    ----------
    n
        The chosen number of integrators (the best whole n).
    decided
        True when that n fits the low end and beats every other n clearly.
    plausible
        Every whole n the data do not rule out (``(n,)`` when decided).
    slope_n, slope_sigma
        The free fit's n (−slope/20 dB per decade, corrections removed) and
        its standard error.
    phase_deg
        The free fit's asymptotic phase B, degrees (∠K − n·90° when it is one).
    f_lo_hz, f_hi_hz
        The window fitted.
    """

    n: int
    decided: bool
    plausible: tuple[int, ...]
    slope_n: float
    slope_sigma: float
    phase_deg: float
    f_lo_hz: float
    f_hi_hz: float

    def describe(self) -> str:
        """One line: what was fitted and what it says."""
        where = f"{self.f_lo_hz:.4g}-{self.f_hi_hz:.4g} Hz"
        how = (f"slope n = {self.slope_n:.2f} ± {self.slope_sigma:.2f}, asymptotic phase "
               f"{self.phase_deg:.0f} deg, fitted over {where}")
        if self.decided:
            return f"{self.n} integrator(s) from the low-frequency asymptote ({how})"
        if len(self.plausible) == 1:
            return (f"{self.n} integrator(s), the only count the low end allows, though it has "
                    f"not reached a clean asymptote ({how})")
        return (f"the low end of the sweep does not decide the integrator count: "
                f"{' or '.join(str(k) for k in self.plausible)} fit ({how})")


def window(x: np.ndarray) -> np.ndarray:
    """Indices of the fit window: the lowest :data:`WINDOW_DECADES` of log10 f, at least
    :data:`MIN_POINTS` points (all points when the sweep has fewer)."""
    stop = int(np.searchsorted(x, x[0] + WINDOW_DECADES, side="right"))
    return np.arange(min(max(stop, MIN_POINTS), x.size))


def _design(x: np.ndarray, x_top: float):
    """Design matrices of the free magnitude / phase fits on log10 f ``x`` (u = f / 10^x_top)."""
    lnw = np.log(10.0) * (x - x_top)                 # ln(ω/ω_top): conditioning only
    u = 10.0 ** (x - x_top)
    mag = np.stack([np.ones_like(x), -lnw, u ** 2], axis=1)       # A, n, b2
    ph = np.stack([np.ones_like(x), u, u ** 3], axis=1)           # B, b1, b3
    return lnw, mag, ph


def _rss(M: np.ndarray, Y: np.ndarray) -> np.ndarray:
    """Residual sum of squares of least squares of every row of ``Y`` on the columns of ``M``."""
    q, _ = np.linalg.qr(M)
    r = Y - (Y @ q) @ q.T
    return np.sum(r * r, axis=-1)


@dataclass(frozen=True)
class AsymptoteRows:
    """:class:`Asymptote` of many rows at once, as arrays (row ``i``: :meth:`row`)."""

    n: np.ndarray
    decided: np.ndarray
    plausible: np.ndarray      # (rows, MAX_INTEGRATORS + 1) bool
    slope_n: np.ndarray
    slope_sigma: np.ndarray
    phase_deg: np.ndarray
    f_lo_hz: float
    f_hi_hz: float

    def row(self, i: int) -> Asymptote:
        return Asymptote(n=int(self.n[i]), decided=bool(self.decided[i]),
                         plausible=tuple(int(k) for k in np.flatnonzero(self.plausible[i])),
                         slope_n=float(self.slope_n[i]), slope_sigma=float(self.slope_sigma[i]),
                         phase_deg=float(self.phase_deg[i]), f_lo_hz=self.f_lo_hz,
                         f_hi_hz=self.f_hi_hz)


def fit_asymptote(freq_hz, T) -> list[Asymptote]:
    """Fit the low-frequency asymptote of every row of ``T`` (see the module notes).

    Parameters
    ----------
    freq_hz
        Frequencies, Hz, increasing, shape (m,).
    T
        Complex loop gains, shape (rows, m) or (m,).

    Returns
    -------
    list of Asymptote, one per row
    """
    rows = fit_asymptote_rows(freq_hz, T)
    return [rows.row(i) for i in range(rows.n.size)]


def fit_asymptote_rows(freq_hz, T) -> AsymptoteRows:
    """:func:`fit_asymptote` as arrays (no per-row objects: the Monte Carlo's form)."""
    f = np.asarray(freq_hz, dtype=float).reshape(-1)
    T = np.atleast_2d(np.asarray(T, dtype=complex))
    x = np.log10(f)
    w = window(x)
    xw = x[w]
    Tw = T[:, w]
    lnw, mag_m, ph_m = _design(xw, xw[-1])
    ymag = np.log(np.abs(Tw))
    yph = np.unwrap(np.angle(Tw), axis=-1)
    npts = xw.size
    # free fits: n and B continuous
    coef_m, *_ = np.linalg.lstsq(mag_m, ymag.T, rcond=None)
    coef_p, *_ = np.linalg.lstsq(ph_m, yph.T, rcond=None)
    rss_m = np.sum((ymag - (mag_m @ coef_m).T) ** 2, axis=-1)
    rss_p = np.sum((yph - (ph_m @ coef_p).T) ** 2, axis=-1)
    dof = max(npts - 3, 1)
    # scatter of the free fits, floored at a noise no sweep beats (computed, noiseless data)
    s2_m = np.maximum(rss_m / dof, NOISE_FLOOR ** 2)
    s2_p = np.maximum(rss_p / dof, NOISE_FLOOR ** 2)
    cov_nn = np.linalg.pinv(mag_m.T @ mag_m)[1, 1]
    n_free = coef_m[1]
    b_free = coef_p[0]
    sigma_n = np.sqrt(cov_nn * s2_m)
    # every whole n: magnitude with the slope fixed, phase with B fixed at -90 n (+180 m)
    ns = np.arange(MAX_INTEGRATORS + 1)
    chi = np.empty((T.shape[0], ns.size))
    for j, n in enumerate(ns):
        rm = _rss(mag_m[:, [0, 2]], ymag + n * lnw[None, :])
        b_n = -n * np.pi / 2 + np.pi * np.rint((b_free + n * np.pi / 2) / np.pi)
        rp = _rss(ph_m[:, 1:], yph - b_n[:, None])
        chi[:, j] = (rm - rss_m) / s2_m + (rp - rss_p) / s2_p
    sigma_b = np.sqrt(np.linalg.pinv(ph_m.T @ ph_m)[0, 0] * s2_p)
    best, decided, plausible = choose_integrators(chi, n_free, sigma_n,
                                                  -b_free / (np.pi / 2), sigma_b / (np.pi / 2))
    return AsymptoteRows(n=best, decided=decided, plausible=plausible, slope_n=n_free,
                         slope_sigma=sigma_n, phase_deg=np.degrees(b_free),
                         f_lo_hz=float(f[w[0]]), f_hi_hz=float(f[w[-1]]))


def choose_integrators(chi2, slope_n, slope_sigma, phase_n=None,
                       phase_sigma=None) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The integrator count the low end supports, and whether it is decided (rows at once).

    Evidence weighed: for each whole n = 0 … :data:`MAX_INTEGRATORS`, ``chi2[row, n]``
    is how much worse the low-end fit gets (in units of the free fit's own
    scatter, magnitude and phase together) when the slope is fixed at −20·n
    dB/decade and the asymptotic phase at a multiple of 90° of n's parity,
    instead of both free.  The best n is *decided* when it costs at most
    :data:`ACCEPT_CHI2` (it is an asymptote the data allow) and every other n
    costs :data:`DECIDE_CHI2` more.  ``plausible`` holds every n within
    :data:`DECIDE_CHI2` of the best; when even the best does not fit (the
    sweep has not reached its asymptote) it also holds the whole numbers
    either side of the slope's 3σ range (``slope_n`` ± 3 ``slope_sigma``; a
    slope within :data:`SLOPE_SNAP` of a whole n does not open its neighbour).

    When the phase is given too (``phase_n`` = −B/90°, the free fit's
    asymptotic phase in units of one integrator, ± ``phase_sigma``), a sweep
    that has not reached its asymptote is judged by the phase instead of
    the magnitude slope: the magnitude slope at the bottom of the band is
    still bending (a corner just below or above it), while the asymptotic
    phase of a minimum-phase loop lies between −90°·n and the next corner's
    −90°.  ``plausible`` is then every n within the phase's 3σ range (with
    :data:`SLOPE_SNAP`), plus every n whose χ², rescaled so that the best n
    just fits (its misfit taken as the scatter, σ scaled by √(χ²/ACCEPT)),
    is within :data:`DECIDE_CHI2` of the best.  A slope of 0.02 ± 0.001
    with a phase of 0° then allows 0 only (1 integrator costs −90° of phase
    the data do not show); a sweep starting above its first pole (slope
    1.04, phase −74°) allows 0 or 1, never 2.

    Returns
    -------
    best (int, rows), decided (bool, rows), plausible (bool, rows × counts)
    """
    chi2 = np.atleast_2d(np.asarray(chi2, dtype=float))
    slope_n = np.atleast_1d(np.asarray(slope_n, dtype=float))
    slope_sigma = np.atleast_1d(np.asarray(slope_sigma, dtype=float))
    ns = np.arange(chi2.shape[1])
    best = np.argmin(chi2, axis=1)
    low = chi2[np.arange(chi2.shape[0]), best]
    fits = low <= ACCEPT_CHI2
    plausible = chi2 - low[:, None] < DECIDE_CHI2
    lo = np.maximum(np.floor(slope_n - 3 * slope_sigma + SLOPE_SNAP), 0)
    hi = np.minimum(np.ceil(slope_n + 3 * slope_sigma - SLOPE_SNAP), ns[-1])
    hi = np.maximum(hi, lo)
    around = (ns[None, :] >= lo[:, None]) & (ns[None, :] <= hi[:, None])
    if phase_n is not None:
        phase_n = np.atleast_1d(np.asarray(phase_n, dtype=float))
        phase_sigma = np.atleast_1d(np.asarray(
            np.zeros_like(phase_n) if phase_sigma is None else phase_sigma, dtype=float))
        plo = np.maximum(np.floor(phase_n - 3 * phase_sigma + SLOPE_SNAP), 0)
        phi = np.minimum(np.ceil(phase_n + 3 * phase_sigma - SLOPE_SNAP), ns[-1])
        phi = np.maximum(phi, plo)
        by_phase = (ns[None, :] >= plo[:, None]) & (ns[None, :] <= phi[:, None])
        scaled = chi2 * (ACCEPT_CHI2 / np.maximum(low, ACCEPT_CHI2))[:, None]
        by_chi2 = scaled - scaled.min(axis=1, keepdims=True) < DECIDE_CHI2
        around = by_phase | by_chi2
    plausible |= ~fits[:, None] & around
    decided = fits & (plausible.sum(axis=1) == 1)
    return best, decided, plausible


def low_end_gain_db(freq_hz, T) -> float:
    """|T(0)| in dB of a sweep without integrators, from its low-frequency asymptote.

    The magnitude model of the module notes with n = 0, ln|T| = A + b2·u², is
    fitted over the window (:func:`window`) and read at u = 0: the DC gain, the
    even-power correction of the corners above the window removed.

    Parameters
    ----------
    freq_hz, T
        One sweep: frequencies (Hz, increasing) and its complex loop gain.

    Returns
    -------
    float
        20·log10|T(0)|.
    """
    f = np.asarray(freq_hz, dtype=float).reshape(-1)
    T = np.asarray(T, dtype=complex).reshape(-1)
    x = np.log10(f)
    w = window(x)
    _, mag_m, _ = _design(x[w], x[w][-1])
    coef, *_ = np.linalg.lstsq(mag_m[:, [0, 2]], np.log(np.abs(T[w])), rcond=None)
    return float(20.0 / np.log(10.0) * coef[0])


def low_end_phase(freq_hz, T, n: np.ndarray) -> np.ndarray:
    """∠(1+T) (degrees) at ω → 0+, on the branch of ∠(1+T[:, 0]), from the fitted asymptote.

    The fitted low-end model (slope fixed at −20·n dB/decade, phase from its
    odd-power fit) is followed from 1/1000 of the lowest frequency up to it,
    so an excess phase at the bottom of the band (a delay, a corner above the
    window) is carried back to the asymptote instead of being rounded away.

    Parameters
    ----------
    freq_hz, T
        As for :func:`fit_asymptote`.
    n
        Integrators per row.

    Returns
    -------
    ndarray, shape (rows,)
        The unwrapped ∠(1+T) at the start of the path (ω → 0+).
    """
    f = np.asarray(freq_hz, dtype=float).reshape(-1)
    T = np.atleast_2d(np.asarray(T, dtype=complex))
    n = np.broadcast_to(np.asarray(n, dtype=float), (T.shape[0],))
    x = np.log10(f)
    w = window(x)
    xw = x[w]
    lnw, mag_m, ph_m = _design(xw, xw[-1])
    ymag = np.log(np.abs(T[:, w])) + n[:, None] * lnw[None, :]
    yph = np.unwrap(np.angle(T[:, w]), axis=-1)
    cm, *_ = np.linalg.lstsq(mag_m[:, [0, 2]], ymag.T, rcond=None)     # A, b2
    cp, *_ = np.linalg.lstsq(ph_m, yph.T, rcond=None)                  # B, b1, b3
    # path below the band: x from x0 - 3 to x0, then evaluated with the fitted model
    xs = xw[0] + np.linspace(-3.0, 0.0, 61)
    lnws, mag_s, ph_s = _design(xs, xw[-1])
    logmag = (mag_s[:, [0, 2]] @ cm).T - n[:, None] * lnws[None, :]
    phase = (ph_s @ cp).T
    # anchor the model's phase on the measured first point (the fit's offset there is noise)
    phase += (yph[:, 0] - phase[:, -1])[:, None]
    with np.errstate(over="ignore"):
        tm = np.exp(np.minimum(logmag, 700.0) + 1j * phase)
    ret = np.unwrap(np.angle(1.0 + tm), axis=-1)
    th0 = np.angle(1.0 + T[:, 0])
    # shift the unwrapped path so that its end is the measured principal angle
    ret += (th0 - ret[:, -1])[:, None]
    return np.degrees(ret[:, 0])
