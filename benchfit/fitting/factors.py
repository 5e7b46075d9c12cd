"""The factored model's log response and its Jacobian, evaluated for the refinement.

The same model as :func:`benchfit.fitting.parameters.response` and
:func:`~benchfit.fitting.parameters.log_jacobian` (which stay the readable
definitions and the tests' reference), laid out for speed: every first- and
second-order factor is one row of a (factors × points) array, so each
quantity is a handful of whole-array operations instead of a Python loop per
factor, and the terms the residual computes are kept for the Jacobian at the
same point (the least-squares solver asks for both there).

With x = s/ω (ω = 2πf) a real factor is t = 1 + x and a pair's
t = 1 + x/Q + x²; then

    ∂ln t/∂f = −x/(f·t)             (real)
    ∂ln t/∂f = −(x/Q + 2x²)/(f·t)   (pair, ∂/∂f0)
    ∂ln t/∂Q = −x/(Q²·t)            (pair)

with the sign reversed for poles, ∂ln H/∂gain = 1/gain and ∂ln H/∂τ = −s.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

import numpy as np

from benchfit.fitting.parameters import TWO_PI, Structure


@dataclass(frozen=True)
class _Layout:
    """Where each factor's parameters sit in the value vector.

    Factor rows are ordered real poles, real zeros, pole pairs, zero pairs, so
    the real factors, the pairs, and each kind's poles are contiguous slices.
    """

    freq: np.ndarray    # (k,) index of each factor's frequency
    q: np.ndarray       # (n_pairs,) index of each pair's Q
    sign: np.ndarray    # (k,) +1 zero, −1 pole
    n_real: int         # rows [0, n_real) are real factors, the rest pairs
    rp: int             # real poles: rows [0, rp)
    pp: int             # pole pairs: rows [n_real, n_real + pp)


@lru_cache(maxsize=512)
def _layout(st: Structure) -> _Layout:
    i_rp = 1
    i_pp = i_rp + st.real_poles
    i_rz = i_pp + 2 * st.pole_pairs
    i_zp = i_rz + st.real_zeros
    freq = ([i_rp + k for k in range(st.real_poles)] + [i_rz + k for k in range(st.real_zeros)]
            + [i_pp + 2 * k for k in range(st.pole_pairs)]
            + [i_zp + 2 * k for k in range(st.zero_pairs)])
    sign = [-1.0] * st.real_poles + [1.0] * st.real_zeros + [-1.0] * st.pole_pairs \
        + [1.0] * st.zero_pairs
    n_real = st.real_poles + st.real_zeros
    return _Layout(np.array(freq, dtype=int), np.array(freq[n_real:], dtype=int) + 1,
                   np.array(sign), n_real, st.real_poles, st.pole_pairs)


@dataclass
class Terms:
    """Factor terms at one parameter vector (for :func:`log_jacobian_at`)."""

    values: np.ndarray
    x: np.ndarray       # (k, N) s/ω per factor
    t: np.ndarray       # (k, N) the factor itself


def log_response(st: Structure, values: np.ndarray, s: np.ndarray) -> tuple[np.ndarray, Terms]:
    """ln H at ``s`` (rad/s; 1-D values) and the factor terms behind it.

    The phase is that of one complex logarithm of the product, not unwrapped
    (the refinement's residual wraps the phase of the ratio anyway).
    """
    v = np.asarray(values, dtype=float)
    lay = _layout(st)
    nr = lay.n_real
    x = (1.0 / (TWO_PI * v[lay.freq]))[:, None] * s[None, :]
    t = np.empty_like(x)
    t[:nr] = 1.0 + x[:nr]
    if lay.q.size:
        xp = x[nr:]
        t[nr:] = 1.0 + xp * ((1.0 / v[lay.q])[:, None] + xp)
    h = np.full(s.shape, v[0], dtype=complex)
    for part, pole in ((t[:lay.rp], True), (t[nr: nr + lay.pp], True),
                       (t[lay.rp: nr], False), (t[nr + lay.pp:], False)):
        if part.shape[0]:
            p = part[0] if part.shape[0] == 1 else np.prod(part, axis=0)
            h = h / p if pole else h * p
    if st.integrators:
        h /= s ** st.integrators
    out = np.log(h)
    if st.delay:
        out -= v[-1] * s
    return out, Terms(values=v, x=x, t=t)


def log_jacobian_at(st: Structure, terms: Terms, s: np.ndarray) -> np.ndarray:
    """∂ln H/∂parameter at the point of ``terms``, shape (P, N) (rows: parameters)."""
    v = terms.values
    lay = _layout(st)
    nr = lay.n_real
    jt = np.empty((v.shape[0], s.shape[0]), dtype=complex)
    jt[0] = 1.0 / v[0]
    if lay.freq.size:
        xi = terms.x / terms.t
        d = np.empty_like(xi)
        d[:nr] = -xi[:nr]
        if lay.q.size:
            iq = 1.0 / v[lay.q]
            xp = xi[nr:]
            # −(x/Q + 2x²)/t = −(x/t)·(1/Q + 2x)
            d[nr:] = -xp * (iq[:, None] + 2.0 * terms.x[nr:])
            jt[lay.q] = xp * (-lay.sign[nr:] * iq * iq)[:, None]
        jt[lay.freq] = d * (lay.sign / v[lay.freq])[:, None]
    if st.delay:
        jt[-1] = -s
    return jt
