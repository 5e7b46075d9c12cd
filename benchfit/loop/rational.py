"""Ratios of polynomials in s, and the same algebra on sampled values.

Networks describe their impedances once, as expressions built from
resistors and capacitors with series/parallel connections.  The same
expression is evaluated in two "backends":

* :data:`POLY` — exact polynomial arithmetic (coefficients, highest power
  first) in a normalised variable ``s' = s / w0``, so the coefficients of a
  network with time constants from nanoseconds to seconds stay well scaled.
  This gives the pole/zero model of a network.
* :data:`VALUES` — plain complex arrays (broadcasting), used for fast
  vectorised evaluation, e.g. thousands of Monte Carlo part draws at once.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np


@dataclass(frozen=True)
class _Backend:
    name: str

    def mul(self, a: Any, b: Any) -> Any:
        if self.name == "poly":
            return np.polymul(np.atleast_1d(a), np.atleast_1d(b))
        return a * b

    def add(self, a: Any, b: Any) -> Any:
        if self.name == "poly":
            return np.polyadd(np.atleast_1d(a), np.atleast_1d(b))
        return a + b


POLY = _Backend("poly")
VALUES = _Backend("values")


@dataclass(frozen=True, eq=False)
class Frac:
    """num/den in one backend (polynomial coefficients or sampled values)."""

    num: Any
    den: Any
    backend: _Backend

    def __mul__(self, o: Frac) -> Frac:
        b = self.backend
        if b is VALUES:
            return Frac(self.value() * o.value(), None, b)
        return Frac(b.mul(self.num, o.num), b.mul(self.den, o.den), b)

    def __truediv__(self, o: Frac) -> Frac:
        b = self.backend
        if b is VALUES:
            return Frac(self.value() / o.value(), None, b)
        return Frac(b.mul(self.num, o.den), b.mul(self.den, o.num), b)

    def value(self) -> Any:
        """The sampled value (VALUES backend only; ``den`` None means 1)."""
        return self.num if self.den is None else self.num / self.den


class Algebra:
    """Build impedances of R and C parts in one backend.

    Parameters
    ----------
    backend
        :data:`POLY` or :data:`VALUES`.
    s
        Complex frequency in rad/s (VALUES backend; broadcastable arrays).
    w0
        Normalising angular frequency in rad/s (POLY backend): polynomials
        are in ``s/w0``.
    """

    def __init__(self, backend: _Backend, *, s: Any = None, w0: float = 1.0) -> None:
        self.backend = backend
        self.s = s
        self.w0 = float(w0)

    def const(self, value: Any) -> Frac:
        if self.backend is POLY:
            return Frac(np.array([float(value)]), np.array([1.0]), POLY)
        return Frac(value, None, VALUES)  # values are kept collapsed: den None = 1

    def resistor(self, r: Any) -> Frac:
        """Impedance of a resistor r (ohm)."""
        return self.const(r)

    def capacitor(self, c: Any) -> Frac:
        """Impedance 1/(sC) of a capacitor c (F)."""
        if self.backend is POLY:
            return Frac(np.array([1.0]), np.array([self.w0 * float(c), 0.0]), POLY)
        s = np.asarray(self.s)
        if not np.any(s.real):  # on the jω axis: 1/(jωC) = −j/(ωC), a cheaper real division
            return Frac(-1j / (s.imag * c), None, VALUES)
        return Frac(1.0 / (s * c), None, VALUES)

    def pole(self, w: float) -> Frac:
        """1/(1 + s/w): a real pole at -w rad/s with unity DC gain (w = inf: 1)."""
        if not np.isfinite(w):
            return self.const(1.0)
        if self.backend is POLY:
            return Frac(np.array([1.0]), np.array([self.w0 / w, 1.0]), POLY)
        return Frac(1.0 / (1.0 + self.s / w), None, VALUES)

    def series(self, a: Frac, b: Frac) -> Frac:
        """a + b."""
        bk = self.backend
        if bk is VALUES:
            return Frac(a.value() + b.value(), None, bk)
        return Frac(bk.add(bk.mul(a.num, b.den), bk.mul(b.num, a.den)), bk.mul(a.den, b.den), bk)

    def parallel(self, a: Frac, b: Frac) -> Frac:
        """a·b/(a + b), written so no common factor appears."""
        bk = self.backend
        if bk is VALUES:
            av, bv = a.value(), b.value()
            return Frac(av * bv / (av + bv), None, bk)
        return Frac(bk.mul(a.num, b.num), bk.add(bk.mul(a.num, b.den), bk.mul(b.num, a.den)), bk)


def _trim(p: np.ndarray) -> np.ndarray:
    p = np.atleast_1d(np.asarray(p, dtype=float))
    scale = np.max(np.abs(p)) if p.size else 0.0
    nz = np.flatnonzero(np.abs(p) > 1e-13 * scale)
    return p[nz[0]:] if nz.size else np.array([0.0])


def frac_to_zpk(f: Frac, w0: float) -> tuple[np.ndarray, np.ndarray, float]:
    """Zeros, poles (rad/s) and scipy-style gain of a POLY fraction in s/w0."""
    num = _trim(f.num)
    den = _trim(f.den)
    zeros = np.roots(num) * w0
    poles = np.roots(den) * w0
    # leading coefficients: num(s) = a_n (s/w0)^n + ..., so k = a_n/b_m · w0^(m-n)
    k = float(num[0] / den[0]) * w0 ** (len(den) - len(num))
    return zeros.astype(complex), poles.astype(complex), k
