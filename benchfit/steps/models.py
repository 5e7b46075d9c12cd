"""Step-response models: second order, third order, and any rational closed loop.

All models return the output level against time for a step applied at ``t0``:
``initial`` before it, ``initial + step · u(t − t0)`` after it, where ``u`` is
the unit-DC-gain step response of the model (u(0) = 0, u(∞) = 1 for a stable
model).  Evaluation is vectorised over the time axis; no time-stepping loop.

Second order: H(s) = ωn² / (s² + 2ζωn s + ωn²), every ζ > 0 (under-, critically
and over-damped) through one formula,

    u(τ) = 1 − e^(−ζωn τ) · [cosh(βτ) + ζωn · sinh(βτ)/β],   β² = ωn²(ζ² − 1),

which is cos/sin for ζ < 1, cosh/sinh for ζ > 1 and (1 + ωn τ) at ζ = 1 (a
standard result, e.g. any control textbook's second-order step response).
"""

from __future__ import annotations

import math

import numpy as np
from scipy import linalg

from benchfit.errors import InputError
from benchfit.fitting.model import PlantModel
from benchfit.loop.margins import margins_of_model
from benchfit.loop.timeresponse import reference_step

TWO_PI = 2.0 * math.pi


# ----- second-order relations (textbook) -----------------------------------------------
def overshoot_pct_from_zeta(zeta: float | np.ndarray) -> float | np.ndarray:
    """Percent overshoot of the second-order step: 100·exp(−πζ/√(1−ζ²)); 0 for ζ ≥ 1."""
    z = np.asarray(zeta, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        os_ = 100.0 * np.exp(-math.pi * z / np.sqrt(np.clip(1.0 - z * z, 0.0, None)))
    out = np.where(z < 1.0, os_, 0.0)
    return float(out) if out.ndim == 0 else out


def zeta_from_overshoot_pct(overshoot_pct: float) -> float:
    """Inverse of :func:`overshoot_pct_from_zeta` for 0 < %OS < 100."""
    if not 0.0 < overshoot_pct < 100.0:
        raise ValueError(f"overshoot must lie in (0, 100) %, found {overshoot_pct}")
    ln = math.log(overshoot_pct / 100.0)
    return -ln / math.sqrt(math.pi**2 + ln * ln)


def zeta_from_log_decrement(delta: float) -> float:
    """ζ from the logarithmic decrement per full period: δ / √(4π² + δ²)."""
    return delta / math.sqrt(4.0 * math.pi**2 + delta * delta)


# ----- second order ------------------------------------------------------------------
def _decaying_pair(t: np.ndarray, zeta: float, wn: float) -> tuple[np.ndarray, np.ndarray]:
    """e^(−σt)·cosh(βt) and e^(−σt)·sinh(βt)/β for t ≥ 0, σ = ζωn, β² = ωn²(ζ² − 1).

    cos/sin when under-damped, sums of decaying exponentials when over-damped (β < σ,
    so nothing overflows at long times), and their series in β²t² near ζ = 1.
    """
    sig = zeta * wn
    b2 = wn * wn * (zeta * zeta - 1.0)  # β², negative when under-damped
    if b2 < 0:
        wd = math.sqrt(-b2)
        decay = np.exp(-sig * t)
        ec, es = decay * np.cos(wd * t), decay * np.sin(wd * t) / wd
    elif b2 > 0:
        beta = math.sqrt(b2)
        e1 = np.exp((beta - sig) * t)
        e2 = np.exp((-beta - sig) * t)
        ec, es = 0.5 * (e1 + e2), 0.5 * (e1 - e2) / beta
    else:
        decay = np.exp(-sig * t)
        ec, es = decay, decay * t
    x = b2 * t * t
    small = np.abs(x) < 1e-6
    if b2 != 0.0 and np.any(small):  # no cancellation near ζ = 1
        ts, xs = t[small], x[small]
        decay = np.exp(-sig * ts)
        ec[small] = decay * (1.0 + xs / 2.0 + xs * xs / 24.0)
        es[small] = decay * ts * (1.0 + xs / 6.0 + xs * xs / 120.0)
    return ec, es


def unit_second_order(tau: np.ndarray, zeta: float, wn: float) -> np.ndarray:
    """Unit step response of ωn²/(s² + 2ζωn s + ωn²) at times ``tau`` (s); 0 for τ ≤ 0.

    ``wn`` in rad/s.
    """
    tau = np.asarray(tau, dtype=float)
    ec, es = _decaying_pair(np.clip(tau, 0.0, None), zeta, wn)
    return np.where(tau > 0, 1.0 - (ec + zeta * wn * es), 0.0)


def unit_second_order_slope(tau: np.ndarray, zeta: float, wn: float) -> np.ndarray:
    """Time derivative of :func:`unit_second_order` divided by ωn (dimensionless).

    It is ωn·e^(−ζωn τ)·sinh(βτ)/β, the step response of ωn·s/(s² + 2ζωn s + ωn²).
    """
    tau = np.asarray(tau, dtype=float)
    _, es = _decaying_pair(np.clip(tau, 0.0, None), zeta, wn)
    return np.where(tau > 0, wn * es, 0.0)


def resonant_load_step(t: np.ndarray, zeta: float, fn_hz: float, initial: float, droop: float,
                       resonant: float, t0: float) -> np.ndarray:
    """Output after a load step through Zcl = (R_dc·ωn² + R_p·2ζωn·s)/(s² + 2ζωn s + ωn²).

    ``droop`` = −ΔI·R_dc and ``resonant`` = −ΔI·R_p in V: the output settles ``droop``
    away from ``initial`` and rings with a first swing of about ``resonant``·(peak of
    2ζ·slope).  This is the shape of a regulator's closed-loop output impedance around
    its loop crossover (a damped resonance plus the DC droop).
    """
    tau = np.asarray(t, dtype=float) - t0
    wn = TWO_PI * fn_hz
    return initial + droop * unit_second_order(tau, zeta, wn) \
        + resonant * 2.0 * zeta * unit_second_order_slope(tau, zeta, wn)


def second_order_step(t: np.ndarray, zeta: float, fn_hz: float, initial: float, step: float,
                      t0: float) -> np.ndarray:
    """Level (V) of a second-order step applied at ``t0`` (s).

    Parameters
    ----------
    t
        Sample times in s.
    zeta
        Damping ratio ζ > 0.
    fn_hz
        Natural frequency in Hz.
    initial, step
        Level before the step and step size (V).
    t0
        Step instant in s.
    """
    return initial + step * unit_second_order(np.asarray(t, dtype=float) - t0, zeta, TWO_PI * fn_hz)


# ----- rational models --------------------------------------------------------------
def _ss_from_zpk(zeros, poles, k):
    from scipy import signal

    a, b, c, d = signal.zpk2ss(np.asarray(zeros, complex), np.asarray(poles, complex), k)
    return np.real(a), np.real(b), np.real(c), np.real(d)


def rational_unit_step(tau: np.ndarray, zeros, poles, k: float) -> np.ndarray:
    """Step response of k·Π(s−z)/Π(s−p) at times ``tau`` (s), not normalised.

    Exact, without time stepping, from the modal form
    y(τ) = D + C·V·diag((e^(λτ) − 1)/λ)·V⁻¹·B of a state-space realisation whose
    time axis is scaled so the poles are of order one.  When the eigenvectors are
    nearly dependent (repeated poles) the exact zero-order-hold recursion
    x[k+1] = Φ·x[k] + Γ is used instead on a uniform time axis, and the augmented
    matrix exponential expm([[A, B], [0, 0]]·τ) per sample otherwise.
    Negative ``tau`` gives 0.
    """
    tau = np.asarray(tau, dtype=float)
    t = np.clip(tau, 0.0, None)
    poles = np.asarray(poles, complex).reshape(-1)
    zeros = np.asarray(zeros, complex).reshape(-1)
    if zeros.size > poles.size:
        raise InputError("model has more zeros than poles; a step response needs a proper model")
    if poles.size == 0:  # a pure gain
        return np.where(tau > 0, float(k), 0.0)
    # Scale s by w so poles are ~1: H(s) = H'(s/w) with H' = k·w^(nz−np)·Π(s'−z/w)/Π(s'−p/w).
    mags = np.abs(np.concatenate([poles, zeros]))
    mags = mags[mags > 0]
    w = float(np.exp(np.mean(np.log(mags)))) if mags.size else 1.0
    a, b, c, d = _ss_from_zpk(zeros / w, poles / w, k * w ** (zeros.size - poles.size))
    ts = t * w
    lam, v = linalg.eig(a)
    out = None
    if np.linalg.cond(v) < 1e8:
        wts = (c[0].astype(complex) @ v) * linalg.solve(v, b[:, 0].astype(complex))
        lt = np.outer(ts, lam)
        tiny = np.abs(lam) < 1e-12
        with np.errstate(divide="ignore", invalid="ignore"):
            phi = np.where(tiny, ts[:, None], np.expm1(lt) / np.where(tiny, 1.0, lam))
        out = np.real((phi * wts).sum(axis=1)) + d[0, 0]  # (faster than a complex matmul here)
    if out is None or not np.all(np.isfinite(out)):
        out = _step_by_expm(ts, a, b[:, 0], c[0], d[0, 0])
    return np.where(tau > 0, out, 0.0)


def _step_by_expm(ts: np.ndarray, a, b, c, d) -> np.ndarray:
    """Exact step response for any A (repeated poles too), via matrix exponentials."""
    n = a.shape[0]
    m = np.zeros((n + 1, n + 1))
    m[:n, :n] = a
    m[:n, n] = b

    def state(tt):  # x(tt) for a unit step at 0, tt ≥ 0 (array)
        return linalg.expm(np.asarray(tt)[:, None, None] * m[None, :, :])[:, :n, n]

    pos = np.flatnonzero(ts > 0)
    out = np.zeros_like(ts)
    if pos.size == 0:
        return out
    tp = ts[pos]
    steps = np.diff(tp)
    if tp.size > 2 and np.all(steps > 0) and np.ptp(steps) <= 1e-6 * steps.mean():
        dt = float(steps.mean())
        full = linalg.expm(m * dt)
        phi, gam = full[:n, :n], full[:n, n]
        x = state([tp[0]])[0]
        xs = np.empty((tp.size, n))
        for i in range(tp.size):  # zero-order hold is exact for a constant input
            xs[i] = x
            x = phi @ x + gam
    else:
        xs = state(tp)
    out[pos] = xs @ c + d
    return out


def third_order_step(t: np.ndarray, zeta: float, fn_hz: float, fp_hz: float, initial: float,
                     step: float, t0: float) -> np.ndarray:
    """Second-order pair times a real pole at ``fp_hz``: ωn²·a / ((s²+2ζωn s+ωn²)(s+a)).

    Unit DC gain; ``fp_hz`` is the real pole's frequency in Hz (a = 2π·fp).
    """
    wn = TWO_PI * fn_hz
    pa = TWO_PI * fp_hz
    root = np.sqrt(complex(zeta * zeta - 1.0))
    poles = [-wn * (zeta - root), -wn * (zeta + root), -pa]
    tau = np.asarray(t, dtype=float) - t0
    u = rational_unit_step(tau, [], poles, wn * wn * pa)
    return initial + step * u


# ----- closed loop from a loop gain ---------------------------------------------------
def closed_loop_zpk(loop: PlantModel) -> tuple[np.ndarray, np.ndarray, float]:
    """Zeros, poles and gain of T/(1+T) for a rational loop gain ``loop`` (PlantModel).

    A loop with a delay has no rational closed loop; :func:`closed_loop_unit_step`
    simulates that case exactly instead of approximating the delay.
    """
    if loop.delay_s > 0:
        raise InputError("a loop with a delay has no rational closed loop; "
                         "use closed_loop_unit_step, which simulates the delay exactly")
    b, a = loop.to_tf()
    den = np.polyadd(a, b)
    num = np.trim_zeros(b, "f")
    den = np.trim_zeros(den, "f")
    if den.size <= 1:
        raise InputError("closed loop T/(1+T) has no poles; the loop gain cannot be used")
    k = float(num[0] / den[0])
    return np.roots(num), np.roots(den), k


def closed_loop_unit_step(tau: np.ndarray, loop: PlantModel) -> tuple[np.ndarray, float]:
    """Step response of T/(1+T) normalised to its final value, and that DC gain.

    Raises
    ------
    InputError
        When the closed loop is unstable (no final value to normalise by).
    """
    if loop.delay_s > 0:
        return _delayed_closed_loop_unit_step(np.asarray(tau, dtype=float), loop)
    z, p, k = closed_loop_zpk(loop)
    if np.any(p.real >= 0):
        raise InputError(f"closed loop T/(1+T) is unstable (pole at {p[np.argmax(p.real)]:.4g} rad/s); "
                         "no step response to fit")
    dc = float(np.real(k * np.prod(-z) / np.prod(-p)))
    if not np.isfinite(dc) or abs(dc) < 1e-12:
        raise InputError("closed loop T/(1+T) has zero DC gain; cannot normalise its step")
    return rational_unit_step(tau, z, p, k) / dc, dc


def _delayed_closed_loop_unit_step(tau: np.ndarray, loop: PlantModel) -> tuple[np.ndarray, float]:
    """Closed-loop step of a loop gain with a pure delay, the delay simulated exactly.

    Uses the loop layer's time-domain simulation (a whole number of time steps
    per delay, no Padé approximant), interpolated onto ``tau``.
    """
    if not margins_of_model(loop).closed_loop_stable:
        raise InputError("closed loop T/(1+T) is unstable (Nyquist count of the loop gain); "
                         "no step response to fit")
    t_end = float(np.max(tau)) if tau.size else 0.0
    if t_end <= 0:
        return np.zeros_like(tau), 1.0
    r = reference_step(loop, sensing_gain=1.0, step=1.0, t_end_s=t_end)
    dc = float(r.final_value)
    if not np.isfinite(dc) or abs(dc) < 1e-12:
        raise InputError("closed loop T/(1+T) has zero DC gain; cannot normalise its step")
    return np.interp(tau, r.time_s, r.value, left=0.0) / dc, dc
