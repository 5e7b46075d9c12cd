"""Vector fitting of one complex frequency response, written here in numpy.

Method (published):

* B. Gustavsen and A. Semlyen, "Rational approximation of frequency domain
  responses by vector fitting", IEEE Trans. Power Delivery 14(3), 1999:
  pole relocation by fitting ``sigma(s)·H(s)`` and ``sigma(s)`` with common
  poles, new poles = zeros of ``sigma``.
* B. Gustavsen, "Improving the pole relocating properties of vector fitting",
  IEEE Trans. Power Delivery 21(3), 2006: relaxed non-triviality constraint
  (``sigma``'s constant term is free; one extra equation fixes the scale).
* D. Deschrijver, M. Mrozowski, T. Dhaene and D. De Zutter, "Macromodeling of
  multiport systems using a fast implementation of the vector fitting
  method", IEEE Microwave Wireless Compon. Lett. 18(6), 2008: QR of the
  stacked system so only the ``sigma`` block is solved.

Everything here works in *scaled* complex frequency ``s / omega_scale`` so a
sweep over six decades stays well conditioned; :func:`vf_to_zpk` converts the
result back to rad/s.  The model is

    H(s) = sum_i r_i / (s - p_i) + d + s·e

with real coefficients: complex poles come in exact conjugate pairs, each
pair carried by two real unknowns.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import linalg
from scipy.linalg.lapack import dgeev as _dgeev
from scipy.linalg.lapack import dgeqrf as _dgeqrf
from scipy.linalg.lapack import dtrtrs as _dtrtrs

from benchfit.errors import FitError

#: |d~| below this (relative) means the relaxed solve degenerated; re-solve with it fixed.
_RELAX_TOL = 1e-8
#: A pole with |Im| below this fraction of |p| is treated as real.
_REAL_TOL = 1e-9


@dataclass(frozen=True)
class VFResult:
    """Pole/residue model in scaled frequency (see module docstring).

    Attributes
    ----------
    poles, residues
        Complex, full conjugate sets (scaled units).
    d, e
        Direct and proportional terms (real; ``e`` in scaled units).
    iterations
        Pole-relocation iterations done.
    converged
        True when the poles stopped moving before the iteration cap.
    flipped
        The poles (scaled, after mirroring) that came out unstable in the last
        relocation and were mirrored into the left half-plane (a hint the
        plant may really be unstable).
    """

    poles: np.ndarray
    residues: np.ndarray
    d: float
    e: float
    iterations: int
    converged: bool
    flipped: np.ndarray

    def at(self, s: np.ndarray) -> np.ndarray:
        """Evaluate at scaled complex frequency ``s``."""
        s = np.asarray(s, dtype=complex)
        h = (self.residues[None, :] / (s[:, None] - self.poles[None, :])).sum(axis=1)
        return h + self.d + s * self.e


def _split(poles: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Real poles and the upper members of complex pairs."""
    poles = np.asarray(poles, dtype=complex)
    isreal = np.abs(poles.imag) <= _REAL_TOL * np.maximum(np.abs(poles), 1e-300)
    return poles[isreal].real.astype(complex), poles[~isreal & (poles.imag > 0)]


def _arrange(poles: np.ndarray) -> np.ndarray:
    """Canonical order: real poles, then each upper pair member followed by its conjugate."""
    re, cx = _split(poles)
    re = np.sort(re.real)
    cx = cx[np.argsort(np.abs(cx))]
    out = np.empty(re.shape[0] + 2 * cx.shape[0], dtype=complex)
    out[: re.shape[0]] = re
    out[re.shape[0]::2] = cx
    out[re.shape[0] + 1::2] = np.conj(cx)
    return out


def _kinds(poles: np.ndarray) -> np.ndarray:
    """0 for a real pole, 1 and 2 for the upper and lower member of a pair
    (poles in :func:`_arrange` order)."""
    n = poles.shape[0]
    kind = np.zeros(n, dtype=int)
    first = np.flatnonzero(poles.imag > 0.0)
    first = first[first + 1 < n]
    kind[first], kind[first + 1] = 1, 2
    return kind


def _basis(s: np.ndarray, poles: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Real-coefficient partial-fraction basis Φ (n_s × N complex) and a kind vector.

    ``kind`` is 0 for a real pole, 1 for the first and 2 for the second
    column of a complex pair (1/(s-a)+1/(s-a*) and j/(s-a)-j/(s-a*)).
    Poles are in :func:`_arrange` order (each pair's upper member first).
    """
    inv = 1.0 / (s[:, None] - poles[None, :])
    kind = _kinds(poles)
    first = np.flatnonzero(kind == 1)
    phi = inv.copy()
    a, b = inv[:, first], inv[:, first + 1]
    phi[:, first] = a + b
    phi[:, first + 1] = 1j * (a - b)
    return phi, kind


def _coeffs_to_residues(c: np.ndarray, kind: np.ndarray) -> np.ndarray:
    r = c.astype(complex)
    for i in np.flatnonzero(kind == 1):
        r[i] = c[i] + 1j * c[i + 1]
        r[i + 1] = c[i] - 1j * c[i + 1]
    return r


def _colscale(a: np.ndarray) -> np.ndarray:
    """1/norm of each column (1 for an all-zero column); a non-finite entry raises.

    Checking the column norms rather than every entry: a NaN or inf anywhere
    makes its column's norm non-finite.
    """
    n = np.sqrt(np.einsum("ij,ij->j", a, a))
    if not np.all(np.isfinite(n)):
        raise linalg.LinAlgError("non-finite vector-fitting system")
    n[n == 0] = 1.0
    return 1.0 / n


def _r_factor(a: np.ndarray) -> np.ndarray:
    """R of a = QR in the upper triangle of the returned square block, Q never formed.

    LAPACK's dgeqrf directly: numpy's ``qr(mode="r")`` costs twice as much on
    the small systems vector fitting solves hundreds of times per fit.  Below
    the diagonal are LAPACK's reflectors: read the block only through
    :func:`_solve_upper` or its diagonal.
    """
    qr, _, _, info = _dgeqrf(a)
    if info != 0:
        raise linalg.LinAlgError(f"QR factorisation failed (info {info})")
    m = a.shape[1]
    return qr[:m, :m]


def _solve_upper(r: np.ndarray, b: np.ndarray) -> np.ndarray | None:
    """x with triu(r)·x = b, or None when triu(r) is numerically singular."""
    d = np.abs(np.diag(r))
    if not d.size or not d.min() > 1e-13 * d.max():
        return None
    x, info = _dtrtrs(r, b)
    return x if info == 0 else None


def _state_matrix(poles: np.ndarray, kind: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Real block-diagonal A and input vector b of the basis :func:`_basis` builds."""
    n = poles.shape[0]
    am = np.zeros((n, n))
    bm = np.zeros(n)
    r = np.flatnonzero(kind == 0)
    am[r, r] = poles[r].real
    bm[r] = 1.0
    c = np.flatnonzero(kind == 1)
    am[c, c] = am[c + 1, c + 1] = poles[c].real
    am[c, c + 1] = poles[c].imag
    am[c + 1, c] = -poles[c].imag
    bm[c] = 2.0
    return am, bm


def _relocate(s, h, w, poles, direct, proportional, mirror=True):
    """One relaxed pole-relocation step; returns (new poles, mirrored poles).

    ``mirror=False`` keeps right-half-plane poles where they are (a plant that
    really is unstable); nothing is then reported as mirrored.
    """
    phi, kind = _basis(s, poles)
    n_s, n = phi.shape
    n_num = n + int(direct) + int(proportional)
    ncol = n_num + n + 1
    # Real system [num | den | rhs]: the complex rows stacked as (real; imag)
    # with a zero right-hand side, then the relaxation row, built in place,
    # column-major for LAPACK.
    m = 2 * n_s
    a = np.zeros((m + 1, ncol + 1), order="F")
    wphi = w[:, None] * phi
    a[:n_s, :n], a[n_s:m, :n] = wphi.real, wphi.imag
    j = n
    if direct:
        a[:n_s, j] = w
        j += 1
    if proportional:
        a[:n_s, j], a[n_s:m, j] = (w * s).real, (w * s).imag
        j += 1
    wh = w * h
    den = -wh[:, None] * phi
    a[:n_s, j: j + n], a[n_s:m, j: j + n] = den.real, den.imag
    a[:n_s, ncol - 1], a[n_s:m, ncol - 1] = -wh.real, -wh.imag
    scale_cols = _colscale(a[:m, :ncol])
    a[:m, :ncol] *= scale_cols
    # Relaxation row: Re sum_k sigma(s_k) = n_s, scaled like the data rows.
    scale = np.linalg.norm(wh) / n_s
    a[m, n_num: n_num + n] = phi.real.sum(axis=0)
    a[m, ncol - 1] = n_s
    a[m, n_num:ncol] *= scale * scale_cols[n_num:]
    a[m, ncol] = n_s * scale
    # Fast VF: one QR of the whole system; the sigma unknowns come from the
    # R22 block and its slice of the transformed right-hand side alone, since
    # the numerator unknowns are free.
    r = _r_factor(a)
    x = _solve_upper(r[n_num:ncol, n_num:ncol], r[n_num:ncol, ncol])
    if x is None:
        x = np.linalg.lstsq(np.triu(r[n_num:ncol, n_num:ncol]), r[n_num:ncol, ncol], rcond=None)[0]
    x = x * scale_cols[n_num:]
    c_sig, d_sig = x[:n], x[n]
    if abs(d_sig) < _RELAX_TOL or not np.isfinite(d_sig):
        # Degenerate relaxed solution (Gustavsen 2006, sec. III): fix d~ and re-solve.
        d_fix = _RELAX_TOL if not (d_sig < 0) else -_RELAX_TOL
        b2 = -a[:m, ncol - 1] * (d_fix / scale_cols[-1])
        y = np.linalg.lstsq(a[:m, : ncol - 1], b2, rcond=None)[0]
        c_sig = y[n_num:] * scale_cols[n_num:-1]
        d_sig = d_fix
    # Zeros of sigma: eig(A - b c~ / d~) in real state-space form.
    am, bm = _state_matrix(poles, kind)
    wr, wi, _, _, info = _dgeev(am - np.outer(bm, c_sig) / d_sig, compute_vl=0, compute_vr=0)
    if info != 0:
        raise linalg.LinAlgError(f"eigenvalues did not converge (info {info})")
    new = wr + 1j * wi
    if mirror:
        flipped = -np.conj(new[new.real > 0])
        new = np.where(new.real > 0, -np.conj(new), new)
    else:
        flipped = np.zeros(0, dtype=complex)
    # A pole exactly on the axis would make the basis singular on a measured point.
    tiny = 1e-12 * max(np.max(np.abs(new)), 1e-300)
    new = np.where(np.abs(new.real) < tiny, new - tiny, new)
    return _arrange(new), flipped


def fit_residues(s, h, w, poles, direct=True, proportional=False):
    """Weighted least-squares residues, d and e for fixed poles.

    Solved through the R factor of ``[A | b]`` (R11 x = R12): the same
    least-squares solution as an SVD-based solve at a third of the cost;
    a rank-deficient A (coincident poles) falls back to the SVD.

    Returns
    -------
    residues, d, e
    """
    phi, kind = _basis(s, poles)
    n_s, n = phi.shape
    m = n + int(direct) + int(proportional)
    a = np.empty((2 * n_s, m + 1), order="F")
    wphi = w[:, None] * phi
    a[:n_s, :n], a[n_s:, :n] = wphi.real, wphi.imag
    j = n
    if direct:
        a[:n_s, j], a[n_s:, j] = w, 0.0
        j += 1
    if proportional:
        a[:n_s, j], a[n_s:, j] = (w * s).real, (w * s).imag
    wh = w * h
    a[:n_s, m], a[n_s:, m] = wh.real, wh.imag
    sc = _colscale(a[:, :m])
    a[:, :m] *= sc
    r = _r_factor(a)
    d = np.abs(np.diag(r)[:m])
    x = _solve_upper(r[:m, :m], r[:m, m]) if m and d.min() > 1e-10 * d.max() else None
    if x is None:
        x = np.linalg.lstsq(a[:, :m], a[:, m], rcond=None)[0]
    x = x * sc
    res = _coeffs_to_residues(x[:n], kind)
    d = float(x[n]) if direct else 0.0
    e = float(x[n + int(direct)]) if proportional else 0.0
    return res, d, e


def initial_poles(n: int, w_min: float, w_max: float, *, damping: float = 0.01,
                  n_real: int | None = None) -> np.ndarray:
    """``n`` starting poles spread log-uniformly over [w_min, w_max] (scaled units).

    Lightly damped complex pairs (Gustavsen & Semlyen 1999, sec. 4: imaginary
    part 100× the real part), plus one real pole when ``n`` is odd.  With
    ``n_real`` that many of the ``n`` are real poles instead, spread
    log-uniformly too (same parity as ``n``; for responses of mostly real
    poles, such as RC networks or impedances).
    """
    if n <= 0:
        return np.zeros(0, dtype=complex)
    n_real = n % 2 if n_real is None else int(n_real)
    if not 0 <= n_real <= n or (n - n_real) % 2:
        raise ValueError(f"n_real={n_real}: expected 0..{n} with n - n_real even")
    n_pairs = (n - n_real) // 2
    mid = np.sqrt(w_min * w_max)
    out = list(-(np.geomspace(w_min, w_max, n_real) if n_real > 1 else np.full(n_real, mid))
               + 0j)
    if n_pairs:
        beta = np.geomspace(w_min, w_max, n_pairs) if n_pairs > 1 else np.array([mid])
        for b in beta:
            out += [complex(-damping * b, b), complex(-damping * b, -b)]
    return _arrange(np.asarray(out, dtype=complex))


def _pole_change(old: np.ndarray, new: np.ndarray) -> float:
    """Largest move of a real or imaginary part, relative to the pole's magnitude.

    Both sets are in :func:`_arrange` order; a different count of real poles
    is an infinite change.
    """
    if old.shape != new.shape or np.count_nonzero(old.imag == 0.0) != np.count_nonzero(
            new.imag == 0.0):
        return np.inf
    if not old.size:
        return 0.0
    d = new - old
    return float(np.max(np.maximum(np.abs(d.real), np.abs(d.imag))
                        / np.maximum(np.abs(old), 1e-300)))


def vector_fit(
    s: np.ndarray,
    h: np.ndarray,
    weight: np.ndarray,
    poles: np.ndarray,
    *,
    direct: bool = True,
    proportional: bool = False,
    max_iter: int = 30,
    tol: float = 1e-9,
    mirror: bool = True,
) -> VFResult:
    """Fit ``h`` at scaled frequencies ``s`` with poles started at ``poles``.

    Parameters
    ----------
    s
        Scaled complex frequencies (``1j·omega/omega_scale``).
    h
        Complex response.
    weight
        Real positive weight per point (multiplies the complex error).
    poles
        Starting poles (scaled), conjugate pairs complete.
    direct, proportional
        Include the constant term d and the term s·e.
    max_iter
        Iteration cap for pole relocation.
    tol
        Convergence: largest relative pole move below ``tol``.
    mirror
        Mirror right-half-plane poles into the left half-plane at each
        relocation (the published method's stability enforcement); False for
        a plant that is really unstable.

    Returns
    -------
    VFResult
    """
    s = np.asarray(s, dtype=complex)
    h = np.asarray(h, dtype=complex)
    w = np.asarray(weight, dtype=float)
    poles = _arrange(np.asarray(poles, dtype=complex))
    n_unknown = 2 * poles.shape[0] + 1 + int(direct) + int(proportional)
    if 2 * s.shape[0] < n_unknown:
        raise FitError(
            f"order {poles.shape[0]} needs at least {(n_unknown + 1) // 2} points; "
            f"the band holds {s.shape[0]}"
        )
    converged = False
    flipped = np.zeros(0, dtype=complex)
    it = 0
    for it in range(1, max_iter + 1):  # noqa: B007 (it is reported after the loop)
        try:
            new, flipped = _relocate(s, h, w, poles, direct, proportional, mirror)
        except (linalg.LinAlgError, ValueError):
            break  # keep the last good poles; reported as not converged
        change = _pole_change(poles, new)
        poles = new
        if change < tol:
            converged = True
            break
    res, d, e = fit_residues(s, h, w, poles, direct, proportional)
    return VFResult(poles=poles, residues=res, d=d, e=e, iterations=it,
                    converged=converged, flipped=flipped)


def vf_to_zpk(vf: VFResult, scale: float) -> tuple[np.ndarray, np.ndarray, float]:
    """Zeros, poles and gain (scipy zpk, s in rad/s) of a scaled VF model.

    Zeros are the finite generalized eigenvalues of the system pencil
    ``[[A, B], [C, D]] - s·[[E, 0], [0, 0]]`` (a descriptor realisation that
    also covers the ``s·e`` term), which avoids forming polynomials.
    """
    p = vf.poles
    n = p.shape[0]
    # Real state-space form of the pole/residue model (the relocation's A and b).
    kind = _kinds(p)
    a, b = _state_matrix(p, kind)
    c = vf.residues.real.copy()
    pair = np.flatnonzero(kind == 1)
    c[pair + 1] = vf.residues[pair].imag
    m = n + (2 if vf.e else 0)
    big_a = np.zeros((m + 1, m + 1))
    big_e = np.zeros((m + 1, m + 1))
    big_a[:n, :n] = a
    big_e[:n, :n] = np.eye(n)
    big_a[:n, m] = b
    big_a[m, :n] = c
    big_a[m, m] = vf.d
    if vf.e:
        # y gets e·u': states x1 = u', x2 = u with E = [[0,1],[0,0]], A = I.
        big_a[n, n] = big_a[n + 1, n + 1] = 1.0
        big_e[n, n + 1] = 1.0
        big_a[n + 1, m] = -1.0
        big_a[m, n] = vf.e
    with np.errstate(all="ignore"):
        lam = linalg.eigvals(big_a, big_e)
    ref = max(float(np.max(np.abs(p))) if n else 1.0, 1.0)
    zeros = lam[np.isfinite(lam) & (np.abs(lam) < 1e12 * ref)]
    zeros = _arrange_zeros(zeros)
    # Gain from the value at the middle of the band (|s| = 1 in scaled units).
    s0 = 1j
    h0 = vf.at(np.array([s0]))[0]
    ratio = np.prod(s0 - p) / np.prod(s0 - zeros) if zeros.size or n else 1.0
    k_scaled = float(np.real(h0 * ratio))
    poles_rad = p * scale
    zeros_rad = zeros * scale
    k = k_scaled * scale ** (n - zeros.shape[0])
    return zeros_rad, poles_rad, k


def _arrange_zeros(z: np.ndarray) -> np.ndarray:
    """Zeros with exact conjugate pairs (numerical noise removed)."""
    z = np.asarray(z, dtype=complex)
    tol = 1e-7 * np.maximum(np.abs(z), 1e-300)
    isreal = np.abs(z.imag) <= tol
    re = z[isreal].real
    up = z[~isreal & (z.imag > 0)]
    out = list(np.sort(re).astype(complex))
    for q in up[np.argsort(np.abs(up))]:
        out += [q, np.conj(q)]
    return np.asarray(out, dtype=complex)
