"""The loop gain T recovered from measurements taken with the loop closed.

A buffer or a regulator usually cannot be opened.  Three measurement pairs
give T without opening it (all return ratios, PM = 180° + ∠T):

* **closed-loop response and known feedback factor** — a non-inverting stage
  has G = A/(1 + Aβ), so Gβ = T/(1 + T) and ``T = Gβ/(1 − Gβ)``.  For an
  inverting stage G = G_ideal · T/(1 + T) with G_ideal = −Zf/Zi; give the
  ideal gain instead and ``T = x/(1 − x)`` with x = G/G_ideal.
* **voltage and current injection at one point** (Middlebrook 1975, the
  general result, quoted from memory)::

      T = (Tv·Ti − 1)/(Tv + Ti + 2)

  with ``Tv = −v_return/v_forward`` for a series voltage injection (v_forward
  on the side that drives the rest of the loop, v_return on the side driven
  by it) and ``Ti = −i_return/i_forward`` for a shunt current injection at
  the same point (i_forward into the driven side, i_return out of the
  driving side); both equal T at an ideal injection point.  The tests derive
  the formula from a two-port loop with finite source and load impedances.
* **open- and closed-loop output impedance** — Z_cl = Z_ol/(1 + T), so
  ``T = Z_ol/Z_cl − 1`` (the loop must take all its feedback from the
  output node; with a second feedback path from elsewhere Blackman's
  formula has a short-circuit term this ignores).

Each function takes :class:`~benchfit.data.FrequencyResponse` objects (or a
number for β and the ideal gain) and returns a loop-gain sweep
(``quantity = "loop"``) on the first sweep's frequencies; a second sweep on
other frequencies is interpolated (log magnitude and unwrapped phase, linear
in log f) and points outside its span are dropped.

**Noise.**  From the closed loop, T = x/(1 − x) with x = Gβ, so a relative
error ε of the measured G becomes a relative error of about |1 + T|·ε in T;
from the impedances, T = Z_ol/Z_cl − 1 and the error is |1 + T|/|T|·ε.  The
closed-loop sweep's own relative noise σ (its point-to-point scatter,
:func:`benchfit.fitting.weights.point_sigma`, or its stddev / coherence /
weight columns; a β sweep's noise adds in quadrature) gives the expected
error σ·|1 + T| of every recovered point, and :func:`noise_limited` drops the
points where it exceeds :data:`MAX_RECOVERED_ERROR` (where |T| is large, T
there is the noise multiplied by |1 + T|: its phase is random and its
Nyquist count means nothing).  What was dropped is recorded in the
provenance settings and :func:`noise_drop_warning` says it.  The injection
and impedance pairs are not trimmed (the impedances' error grows where |T|
is small, not large; the scatter of a clean but sparse sweep's curvature
would read as noise there).
"""

from __future__ import annotations

import numpy as np

from benchfit.data.response import FrequencyResponse
from benchfit.errors import InputError
from benchfit.fitting.weights import point_sigma
from benchfit.loop.loopgain import interp_response

#: |1 − x| (or |Tv + Ti + 2|, |Z_cl|) below this, relative, makes a point unusable: T is infinite there.
SINGULAR = 1e-12


def _on_grid(first: FrequencyResponse, other: FrequencyResponse | complex | float,
             what: str) -> tuple[FrequencyResponse, np.ndarray]:
    """(first restricted to the common span, other's values on those frequencies)."""
    if not isinstance(other, FrequencyResponse):
        v = complex(other)
        if not np.isfinite(v) or v == 0:
            raise InputError(f"{what} {other!r}; expected a finite non-zero value", source=what)
        return first, np.full(len(first), v)
    if np.array_equal(first.freq_hz, other.freq_hz):
        return first, np.asarray(other.response)
    vals = interp_response(other, first.freq_hz)
    keep = np.isfinite(vals)
    if keep.sum() < 2:
        raise InputError(f"the {what} sweep ({other.f_min_hz:.4g}..{other.f_max_hz:.4g} Hz) does "
                         f"not overlap the first one ({first.f_min_hz:.4g}..{first.f_max_hz:.4g} Hz)",
                         source=what)
    return _subset(first, keep), vals[keep]


def _subset(r: FrequencyResponse, keep: np.ndarray) -> FrequencyResponse:
    if keep.all():
        return r
    return FrequencyResponse(freq_hz=r.freq_hz[keep], response=r.response[keep],
                             quantity=r.quantity, meta=dict(r.meta), provenance=r.provenance)


#: Largest expected relative error of a recovered point that is kept: σ·|1 + T| at most 0.1, i.e. about 0.9 dB and 6 deg of noise on T (our own
#: figure: small beside any margin a designer reads, and it keeps the Nyquist curve's phase
#: within a fraction of a turn between neighbouring points)
MAX_RECOVERED_ERROR = 0.1


def measured_sigma(r: FrequencyResponse) -> np.ndarray:
    """Relative noise σ of each point of a measured sweep (per component: nepers of ln|H|,
    radians of phase, their rms), from its own scatter or columns
    (:func:`benchfit.fitting.weights.point_sigma`)."""
    if np.all(r.response == r.response[0]):        # a constant (β as a sweep): no scatter
        return np.zeros(len(r))
    with np.errstate(divide="ignore", invalid="ignore"):
        ps = point_sigma(r.response, stddev=r.stddev, coherence=r.coherence, weight=r.weight)
    return np.sqrt(0.5 * (ps.mag ** 2 + ps.phase ** 2))


def noise_limited(expected_error: np.ndarray, bound: float = MAX_RECOVERED_ERROR) -> np.ndarray:
    """The recovered points to keep: those whose expected relative error is within ``bound``.

    Evidence weighed: ``expected_error`` per point, the measurement's relative
    noise σ (from its scatter) times the factor by which the recovery
    multiplies it (|1 + T| for T = x/(1 − x)).  A point is kept when that error is at most ``bound``
    (:data:`MAX_RECOVERED_ERROR`); nothing else (|T| itself, the frequency) is
    weighed.  Returns a boolean mask.
    """
    e = np.asarray(expected_error, dtype=float)
    return np.isfinite(e) & (e <= bound)


def _result(base: FrequencyResponse, num: np.ndarray, den: np.ndarray, method: str,
            settings: dict, sigma: np.ndarray | None = None) -> FrequencyResponse:
    bad = np.abs(den) <= SINGULAR * np.maximum(np.abs(num), 1.0)
    if bad.all():
        raise InputError(f"{method}: the measurements give an infinite loop gain at every point")
    t = num[~bad] / den[~bad]
    settings = {"method": method, **settings, "dropped_points": int(bad.sum())}
    keep = ~bad
    if sigma is not None:
        sig = np.asarray(sigma, dtype=float)[~bad]
        amp = np.abs(1.0 + t)
        ok = noise_limited(sig * amp)
        if not ok.any():
            raise InputError(f"{method}: the measured noise (relative {np.median(sig):.2g}) times "
                             f"the recovery's error gain leaves no point of T within "
                             f"{MAX_RECOVERED_ERROR:g} relative error")
        if not ok.all():
            fd = base.freq_hz[~bad][~ok]
            settings.update(noise_sigma=float(np.median(sig)), noise_bound=MAX_RECOVERED_ERROR,
                            noisy_points=int((~ok).sum()), noisy_from_hz=float(fd.min()),
                            noisy_to_hz=float(fd.max()),
                            noisy_error_max=float(np.max(sig[~ok] * amp[~ok])),
                            noisy_factor="|1+T|")
        keep = keep.copy()
        keep[np.flatnonzero(~bad)[~ok]] = False
        t = t[ok]
    base = _subset(base, keep)
    return base.with_response(t, quantity="loop", step="loop_recovery", settings=settings)


def noise_drop_warning(t: FrequencyResponse) -> str | None:
    """The warning for the points :func:`noise_limited` dropped from a recovered T, or None."""
    s = t.provenance.settings
    if not s.get("noisy_points"):
        return None
    return (f"dropped {s['noisy_points']} point(s) of the recovered T between "
            f"{s['noisy_from_hz']:.4g} and {s['noisy_to_hz']:.4g} Hz: there the measurement's "
            f"relative noise (about {s['noise_sigma']:.2g}, from its scatter) times "
            f"{s['noisy_factor']} gives T an expected relative error above "
            f"{s['noise_bound']:g} (up to {s['noisy_error_max']:.3g}), so T there is noise; the "
            "verdict and margins use the rest")


def loop_from_closed_loop(closed: FrequencyResponse, beta: FrequencyResponse | complex | float
                          | None = None, *, ideal_gain: FrequencyResponse | complex | float
                          | None = None) -> FrequencyResponse:
    """T from a measured closed-loop response and the known feedback.

    Parameters
    ----------
    closed
        Measured closed-loop gain G = V_out/V_in.
    beta
        Feedback factor β = V-/V_out (number or sweep), non-inverting stage:
        T = Gβ/(1 − Gβ).
    ideal_gain
        Instead of β: the ideal closed-loop gain G_ideal (e.g. −Rf/Rg for an
        inverting stage, 1/β for a non-inverting one): T = x/(1 − x), x = G/G_ideal.
    """
    if (beta is None) == (ideal_gain is None):
        raise InputError("give the feedback factor β or the ideal closed-loop gain, one of them",
                         source="--beta")
    other = beta if beta is not None else ideal_gain
    if beta is not None:
        base, b = _on_grid(closed, beta, "beta")
        x = base.response * b
        how = {"beta": "sweep" if isinstance(beta, FrequencyResponse) else complex(beta).real}
    else:
        base, g = _on_grid(closed, ideal_gain, "ideal gain")
        x = base.response / g
        how = {"ideal_gain": "sweep" if isinstance(ideal_gain, FrequencyResponse)
               else complex(ideal_gain).real}
    sig = measured_sigma(base)
    if isinstance(other, FrequencyResponse):
        sig = np.hypot(sig, _sigma_on(other, base.freq_hz))
    return _result(base, x, 1.0 - x, "closed-loop", how, sig)


def _sigma_on(r: FrequencyResponse, freq_hz: np.ndarray) -> np.ndarray:
    """:func:`measured_sigma` of ``r`` at ``freq_hz`` (nearest point in log f)."""
    sig = measured_sigma(r)
    if np.array_equal(r.freq_hz, freq_hz):
        return sig
    return np.interp(np.log10(freq_hz), np.log10(r.freq_hz), sig)


def loop_from_injection(tv: FrequencyResponse, ti: FrequencyResponse) -> FrequencyResponse:
    """T from voltage- and current-injection ratios at one point:
    T = (Tv·Ti − 1)/(Tv + Ti + 2) (Middlebrook 1975, from memory; see the module notes)."""
    base, i = _on_grid(tv, ti, "current injection")
    v = base.response
    return _result(base, v * i - 1.0, v + i + 2.0, "injection", {})


def loop_from_output_impedance(z_open: FrequencyResponse, z_closed: FrequencyResponse) -> FrequencyResponse:
    """T = Z_ol/Z_cl − 1 from the open- and closed-loop output impedance."""
    base, zc = _on_grid(z_open, z_closed, "closed-loop impedance")
    return _result(base, base.response - zc, zc, "output impedance", {})


#: Error amplification above which :func:`amplification_warning` speaks up.
AMPLIFICATION_WARN = 100.0


def amplification_warning(t: FrequencyResponse, method: str) -> str | None:
    """A warning when the recovery multiplies the measurement's relative error by a lot.

    From the closed loop, T = x/(1 − x) with x = T/(1 + T): a relative error ε in G
    becomes about |1 + T|·ε in T; from the impedances, T + 1 = Zol/Zcl: about
    |(1 + T)/T|·ε·|1 + T| ≈ |1 + T|·ε too.  Where |T| is large the recovered T is
    mostly amplified noise (the crossover region, where |T| ≈ 1, is not).  The
    evidence weighed: the largest |1 + T| of the sweep against 100.
    """
    if method == "injection":
        return None
    amp = float(np.max(np.abs(1.0 + t.response)))
    if amp <= AMPLIFICATION_WARN:
        return None
    f = float(t.freq_hz[int(np.argmax(np.abs(1.0 + t.response)))])
    return (f"the recovered T reaches |1 + T| = {amp:.3g} (at {f:.4g} Hz): a relative error of the "
            f"measurement is multiplied by about that much there, so T far above 0 dB is mostly "
            "noise; the margins near the crossover are unaffected, a stability verdict counted "
            "over the noisy stretch is not")
