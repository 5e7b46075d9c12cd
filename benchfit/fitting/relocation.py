"""The linear algebra of one vector-fitting step (the driver is :mod:`benchfit.fitting.vectfit`).

Poles are kept *arranged* (:func:`arrange`): the real poles first, ascending,
then each complex pair as its upper member followed by its conjugate.  The
real-coefficient partial-fraction basis of an arranged set is ``1/(s-p)`` for
a real pole and ``1/(s-a) + 1/(s-a*)``, ``j/(s-a) - j/(s-a*)`` for a pair, so
every unknown is real (Gustavsen & Semlyen 1999, appendix).

:class:`System` holds one data set (scaled ``s``, response, weight) and the
weighted complex system ``[Φ | 1 | s | -h | -h·Φ]`` (numerator basis, direct
and proportional terms, then ``sigma``'s constant and basis) in a work array
that is written in place at each step: the columns that do not depend on the
poles are written once.  Its complex rows, read as pairs of real rows (real
part, imaginary part) without a copy, are the real least-squares system; the
row order does not matter to a QR factorisation.

One relocation (:meth:`System.relocate`) is one QR of that system (the fast
implementation of Deschrijver et al. 2008: the numerator unknowns are free,
so only the ``sigma`` block of R is solved), a small QR that adds the relaxed
non-triviality equation (Gustavsen 2006), and the eigenvalues of the real
state matrix of ``sigma``'s zeros.  Because ``sigma``'s constant column
``-w·h`` comes right after the numerator columns, R's diagonal entry there is
the residual of fitting ``h`` with the current poles, free: the driver's stop
rule reads it.
"""

from __future__ import annotations

import functools
import math

import numpy as np
from scipy import linalg
from scipy.linalg.lapack import dgeev as _dgeev
from scipy.linalg.lapack import dgeqrf as _dgeqrf
from scipy.linalg.lapack import dtrtrs as _dtrtrs

#: |d~| below this means the relaxed solve degenerated; re-solve with it fixed
#: (Gustavsen 2006, sec. III).
RELAX_TOL = 1e-8
#: A pole with |Im| below this fraction of |p| is treated as real.
REAL_TOL = 1e-9
#: A triangular factor whose smallest diagonal entry, on unit-norm columns, is
#: below this fraction of its largest is treated as singular (least squares instead).
_SINGULAR_SIGMA = 1e-13
_SINGULAR_RESIDUES = 1e-10


def split(poles: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Real poles and the upper members of complex pairs."""
    poles = np.asarray(poles, dtype=complex)
    isreal = np.abs(poles.imag) <= REAL_TOL * np.maximum(np.abs(poles), 1e-300)
    return poles[isreal].real.astype(complex), poles[~isreal & (poles.imag > 0)]


def arrange(poles: np.ndarray) -> np.ndarray:
    """Canonical order: real poles, then each upper pair member followed by its conjugate."""
    re, cx = split(poles)
    re = np.sort(re.real)
    cx = cx[np.argsort(np.abs(cx))]
    out = np.empty(re.shape[0] + 2 * cx.shape[0], dtype=complex)
    out[: re.shape[0]] = re
    out[re.shape[0]::2] = cx
    out[re.shape[0] + 1::2] = np.conj(cx)
    return out


def count_real(poles: np.ndarray) -> int:
    """Number of real poles of an arranged set (they come first, with zero imaginary part)."""
    nz = np.flatnonzero(poles.imag != 0.0)
    return int(nz[0]) if nz.size else int(poles.shape[0])


def state_matrix(poles: np.ndarray, n_real: int) -> tuple[np.ndarray, np.ndarray]:
    """Real block-diagonal A and input vector b of the basis of an arranged pole set."""
    n = poles.shape[0]
    am = np.zeros((n, n))
    am.flat[:: n + 1] = poles.real
    k = np.arange(n_real, n - 1, 2)
    am[k, k + 1] = poles.imag[k]
    am[k + 1, k] = -poles.imag[k]
    bm = np.zeros(n)
    bm[:n_real] = 1.0
    bm[n_real::2] = 2.0
    return am, bm


def coeffs_to_residues(c: np.ndarray, n_real: int) -> np.ndarray:
    """Complex residues of an arranged set from the real basis coefficients."""
    r = c.astype(complex)
    r[n_real::2] = c[n_real::2] + 1j * c[n_real + 1::2]
    r[n_real + 1::2] = np.conj(r[n_real::2])
    return r


def _r_factor(a: np.ndarray) -> np.ndarray:
    """R of a = QR in the upper triangle of the returned square block, Q never formed.

    LAPACK's dgeqrf directly (numpy's ``qr(mode="r")`` costs twice as much on
    these small systems).  Below the diagonal are LAPACK's reflectors: read
    the block only through :func:`_solve_upper`, its diagonal or ``np.triu``.
    A non-finite entry anywhere makes R's diagonal non-finite (Householder
    reflections carry it into every later column), which raises.
    """
    qr, _, _, info = _dgeqrf(a)
    m = a.shape[1]
    r = qr[:m, :m]
    if info != 0 or not np.isfinite(np.trace(r)):
        raise linalg.LinAlgError(f"QR factorisation failed or non-finite system (info {info})")
    return r


def _unit_columns(r: np.ndarray) -> np.ndarray:
    """1/norm of each column of an upper-triangular ``r`` (zero below the diagonal)."""
    n = np.sqrt(np.einsum("ij,ij->j", r, r))
    n[n == 0] = 1.0
    return 1.0 / n


def _solve_upper(r: np.ndarray, b: np.ndarray, rel: float) -> np.ndarray:
    """Least-squares x of r·x = b for an upper-triangular ``r`` (zero below the diagonal).

    Back substitution, or an SVD solve on unit-norm columns when the smallest
    diagonal entry (columns at unit norm) is below ``rel`` of the largest
    (coincident poles).
    """
    sc = _unit_columns(r)
    d = np.abs(r.diagonal()) * sc
    if d.size and d.min() > rel * d.max():
        x, info = _dtrtrs(r, b)
        if info == 0:
            return x
    return np.linalg.lstsq(r * sc, b, rcond=None)[0] * sc


@functools.lru_cache(maxsize=256)
def _layout(n: int, n_real: int) -> tuple:
    """For ``n`` arranged poles of which ``n_real`` are real: the transform of the columns
    ``1/(s-p)`` to the real basis, b of the state matrix (a column), the flat indices of
    the pairs' off-diagonal entries in that matrix, and the pairs' upper members (read-only)."""
    tr = np.eye(n, dtype=complex)
    k = np.arange(n_real, n - 1, 2)
    # columns (1/(s-a), 1/(s-a*)) -> (sum, j·difference)
    tr[k + 1, k] = 1.0
    tr[k, k + 1], tr[k + 1, k + 1] = 1j, -1j
    bm = np.zeros((n, 1))
    bm[:n_real], bm[n_real::2] = 1.0, 2.0
    out = (tr, bm, k * (n + 1) + 1, (k + 1) * (n + 1) - 1, k)
    for a in out:
        a.flags.writeable = False
    return out


@functools.lru_cache(maxsize=64)
def _upper(n: int) -> np.ndarray:
    """n × n mask of the upper triangle (read-only)."""
    m = np.triu(np.ones((n, n)))
    m.flags.writeable = False
    return m


class System:
    """The weighted relocation system of one data set, for a fixed number of poles.

    Parameters
    ----------
    s, h, w
        Scaled complex frequencies, response and real weight per point.
    n
        Number of poles (the count stays fixed across relocations; how many
        of them are real may change).
    direct, proportional
        Include the constant term d and the term s·e.
    """

    def __init__(self, s: np.ndarray, h: np.ndarray, w: np.ndarray, n: int,
                 direct: bool, proportional: bool):
        self.n = n
        self.direct, self.proportional = bool(direct), bool(proportional)
        self.n_num = n + int(direct) + int(proportional)
        n_s = s.shape[0]
        self.n_s = n_s
        self._s = s[:, None]
        self._w = w[:, None]
        self._mh = -h[:, None]
        c = np.zeros((n_s, self.n_num + 1 + n), dtype=complex, order="F")
        j = n
        if direct:
            c[:, j] = w
            j += 1
        if proportional:
            c[:, j] = w * s
        wh = w * h
        c[:, self.n_num] = -wh
        self._c = c
        # The same memory as 2·n_s real rows, column-major, for LAPACK.
        self._a = c.T.view(np.float64).T
        # Relaxation row Re sum_k sigma(s_k) = n_s, weighted like the data rows.
        self._relax = float(np.sqrt(np.vdot(wh, wh).real)) / n_s
        self._phi = np.empty((n_s, n), dtype=complex)
        self._last: tuple[np.ndarray | None, int] = (None, 0)

    def _count_real(self, poles: np.ndarray) -> int:
        """:func:`count_real`, known already for the poles the last relocation returned."""
        last, n_real = self._last
        return n_real if poles is last else count_real(poles)

    def _fill(self, poles: np.ndarray, n_real: int, den: bool) -> None:
        """Write the weighted numerator basis (and ``-h·Φ``) for ``poles`` into the system;
        the unweighted basis Φ is left in ``self._phi``."""
        n = self.n
        np.matmul(1.0 / (self._s - poles), _layout(n, n_real)[0], out=self._phi)
        num = self._c[:, :n]
        np.multiply(self._phi, self._w, out=num)
        if den:
            np.multiply(num, self._mh, out=self._c[:, self.n_num + 1:])

    def relocate(self, poles: np.ndarray, mirror: bool = True
                 ) -> tuple[np.ndarray, np.ndarray, float]:
        """One relaxed pole relocation of an arranged set ``poles``.

        Returns the new poles (arranged), the poles that came out in the
        right half-plane and were mirrored (after mirroring; none when
        ``mirror`` is False), and the weighted residual norm of the best fit
        of ``h`` with the *given* poles (the stop rule's evidence).
        """
        n, n_num, n_s = self.n, self.n_num, self.n_s
        n_real = self._count_real(poles)
        _, bm, up_idx, lo_idx, k = _layout(n, n_real)
        self._fill(poles, n_real, den=True)
        r = _r_factor(self._a)
        resid = abs(float(r[n_num, n_num]))
        # sigma's unknowns [d~, c~]: the R22 block (data rows, zero right-hand
        # side) and the relaxation row, by one small QR.
        z = np.empty((n + 2, n + 2), order="F")
        np.multiply(r[n_num:, n_num:], _upper(n + 1), out=z[: n + 1, : n + 1])
        z[: n + 1, n + 1] = 0.0
        z[n + 1, 0] = z[n + 1, n + 1] = n_s * self._relax
        np.multiply(self._phi.real.sum(axis=0), self._relax, out=z[n + 1, 1: n + 1])
        # column norms of z are those of its R: the singularity check needs no triangle mask
        norms = np.sqrt(np.einsum("ij,ij->j", z[:, : n + 1], z[:, : n + 1]))
        rz = _r_factor(z)
        diag = np.abs(rz.diagonal()[: n + 1]) / np.where(norms > 0, norms, 1.0)
        y = None
        if diag.min() > _SINGULAR_SIGMA * diag.max():
            y, info = _dtrtrs(rz[: n + 1, : n + 1], rz[: n + 1, n + 1])
            y = y if info == 0 else None
        if y is None:
            y = _solve_upper(np.triu(rz[: n + 1, : n + 1]), rz[: n + 1, n + 1], _SINGULAR_SIGMA)
        d_sig = y[0]
        if abs(d_sig) < RELAX_TOL or not np.isfinite(d_sig):
            # Degenerate relaxed solution (Gustavsen 2006, sec. III): fix d~ and re-solve
            # on the data rows.
            d_sig = -RELAX_TOL if d_sig < 0 else RELAX_TOL
            m = z[: n + 1, : n + 1]
            y = np.concatenate([[d_sig], np.linalg.lstsq(m[:, 1:], -d_sig * m[:, 0],
                                                         rcond=None)[0]])
        # Zeros of sigma: eig(A - b c~ / d~) in real state-space form.
        am = bm * (y[1:] / -d_sig)
        flat = am.reshape(-1)
        flat[:: n + 1] += poles.real
        flat[up_idx] += poles.imag[k]
        flat[lo_idx] -= poles.imag[k]
        wr, wi, _, _, info = _dgeev(am, compute_vl=0, compute_vr=0, overwrite_a=1)
        if info != 0:
            raise linalg.LinAlgError(f"eigenvalues did not converge (info {info})")
        return (*self._arranged(wr.tolist(), wi.tolist(), mirror), resid)

    def _arranged(self, wr: list[float], wi: list[float], mirror: bool
                  ) -> tuple[np.ndarray, np.ndarray]:
        """The eigenvalues ``wr + j·wi`` (LAPACK's: a real one has ``wi`` exactly 0, a pair
        is two conjugates) mirrored into the left half-plane when ``mirror``, shifted off
        the imaginary axis when they sit on it, in :func:`arrange` order; and the mirrored
        ones (after mirroring).  Plain Python: the lists hold a few dozen numbers at most,
        where each numpy call would cost more than the loop."""
        flipped = []
        if mirror:
            for i, a in enumerate(wr):
                if a > 0:
                    wr[i] = -a
                    flipped.append(complex(-a, wi[i]))
        mags = [math.hypot(a, b) for a, b in zip(wr, wi, strict=True)]
        # A pole exactly on the axis would make the basis singular on a measured point.
        tiny = 1e-12 * max(max(mags, default=0.0), 1e-300)
        reals, pairs = [], []
        for a, b, m in zip(wr, wi, mags, strict=True):
            if abs(a) < tiny:
                a -= tiny
            if abs(b) <= REAL_TOL * m:
                reals.append(a)
            elif b > 0:
                pairs.append((m, a, b))
        reals.sort()
        pairs.sort()
        seq: list[complex] = [complex(a) for a in reals]
        for _, a, b in pairs:
            seq += [complex(a, b), complex(a, -b)]
        out = np.array(seq, dtype=complex)
        self._last = (out, len(reals))
        return out, np.array(flipped, dtype=complex)

    def residues(self, poles: np.ndarray) -> tuple[np.ndarray, float, float, float]:
        """Weighted least-squares residues, d and e for the arranged ``poles``.

        Solved through the R factor of ``[Φ | 1 | s | -h]`` (R11 x = -R12): the
        same least-squares solution as an SVD-based solve at a third of the
        cost; a rank-deficient Φ (coincident poles) falls back to the SVD.

        Returns
        -------
        residues, d, e, residual norm, the model at every ``s``
        """
        n, n_num = self.n, self.n_num
        n_real = self._count_real(poles)
        self._fill(poles, n_real, den=False)
        r = _r_factor(self._a[:, : n_num + 1])
        x = _solve_upper(r[:n_num, :n_num] * _upper(n_num), -r[:n_num, n_num],
                         _SINGULAR_RESIDUES) if n_num else np.zeros(0)
        res = coeffs_to_residues(x[:n], n_real)
        d = float(x[n]) if self.direct else 0.0
        e = float(x[n + int(self.direct)]) if self.proportional else 0.0
        model = self._phi @ x[:n] + d
        if e:
            model += e * self._s[:, 0]
        return res, d, e, abs(float(r[n_num, n_num])), model
