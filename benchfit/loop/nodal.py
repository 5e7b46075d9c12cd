"""Node equations solved by Cramer's rule in either backend of :mod:`benchfit.loop.rational`.

Small circuits (three unknown nodes at most) are solved by explicit
determinants, so the same code gives exact polynomials (POLY: a pole/zero
model without a numerical factorisation step) or sampled values (VALUES:
vectorised over frequencies and Monte Carlo draws).
"""

from __future__ import annotations

from typing import Any

import numpy as np

from benchfit.loop.rational import POLY


class Ring:
    """+, −, × of polynomials (POLY) or sampled values (VALUES): what Cramer's rule needs."""

    def __init__(self, backend) -> None:
        self.b = backend

    def add(self, *xs):
        out = xs[0]
        for x in xs[1:]:
            out = self.b.add(out, x)
        return out

    def mul(self, *xs):
        out = xs[0]
        for x in xs[1:]:
            out = self.b.mul(out, x)
        return out

    def neg(self, x):
        return -np.asarray(x) if self.b is POLY else -x

    def det(self, m: list[list[Any]]):
        n = len(m)
        if n == 1:
            return m[0][0]
        if n == 2:
            return self.add(self.mul(m[0][0], m[1][1]), self.neg(self.mul(m[0][1], m[1][0])))
        terms = []
        for j in range(n):
            minor = [row[:j] + row[j + 1:] for row in m[1:]]
            t = self.mul(m[0][j], self.det(minor))
            terms.append(t if j % 2 == 0 else self.neg(t))
        return self.add(*terms)


def trim(p: np.ndarray) -> np.ndarray:
    p = np.atleast_1d(np.asarray(p, dtype=float))
    nz = np.flatnonzero(np.abs(p) > 1e-13 * np.max(np.abs(p)))
    return p[nz[0]:] if nz.size else np.array([0.0])


#: Relative distance within which a computed zero is taken to be a known root.
CANCEL_RTOL = 1e-5


def cancel_pair(zeros: list[complex], root: float, poles: list[complex]) -> list[complex]:
    """Cancel a known pole at ``root`` against the zero nearest it.

    The evidence weighed: the nearest computed zero lies within
    :data:`CANCEL_RTOL` (relative) of the known root, which it must when the
    factor is structural; then that zero goes and no pole is added.
    Otherwise the zero stays and the pole is added (the model is then exact,
    with a near-cancelling pair).
    """
    if zeros:
        d = np.abs(np.asarray(zeros) - root)
        i = int(np.argmin(d))
        if d[i] <= CANCEL_RTOL * abs(root):
            return zeros[:i] + zeros[i + 1:]
    poles.append(root)
    return zeros
