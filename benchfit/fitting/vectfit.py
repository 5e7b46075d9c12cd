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

The linear algebra of one relocation (basis, QR, the zeros of ``sigma``, the
residue solve) is in :mod:`benchfit.fitting.relocation`; this module holds
the starting poles, the iteration and its stop rule (:func:`settled`), and the
conversion to zeros, poles and gain.

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

from benchfit.errors import FitError
from benchfit.fitting.relocation import System, arrange, count_real, state_matrix


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
        True when the relocation settled before the iteration cap (the stop
        rule :func:`settled`: the poles stopped moving, or the fit they give
        stopped changing while they moved by less than :data:`STALL_MOVE`).
    flipped
        The poles (scaled, after mirroring) that came out unstable in the last
        relocation and were mirrored into the left half-plane (a hint the
        plant may really be unstable).
    fitted
        The model at the frequencies it was fitted at (None when not computed),
        so a caller judging the fit need not evaluate it again.
    """

    poles: np.ndarray
    residues: np.ndarray
    d: float
    e: float
    iterations: int
    converged: bool
    flipped: np.ndarray
    fitted: np.ndarray | None = None

    def at(self, s: np.ndarray) -> np.ndarray:
        """Evaluate at scaled complex frequency ``s``."""
        s = np.asarray(s, dtype=complex)
        h = (self.residues[None, :] / (s[:, None] - self.poles[None, :])).sum(axis=1)
        return h + self.d + s * self.e


def fit_residues(s, h, w, poles, direct=True, proportional=False):
    """Weighted least-squares residues, d and e for fixed poles (see
    :meth:`benchfit.fitting.relocation.System.residues`).

    Returns
    -------
    residues, d, e
    """
    poles = arrange(np.asarray(poles, dtype=complex))
    sys_ = System(np.asarray(s, dtype=complex), np.asarray(h, dtype=complex),
                  np.asarray(w, dtype=float), poles.shape[0], direct, proportional)
    return sys_.residues(poles)[:3]


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
    return arrange(np.asarray(out, dtype=complex))


def _pole_change(old: np.ndarray, new: np.ndarray) -> float:
    """Largest move of a real or imaginary part, relative to the pole's magnitude.

    Both sets are in :func:`~benchfit.fitting.relocation.arrange` order; a
    different count of real poles is an infinite change.
    """
    if old.shape != new.shape or count_real(old) != count_real(new):
        return np.inf
    if not old.size:
        return 0.0
    d = new - old
    return float(np.max(np.maximum(np.abs(d.real), np.abs(d.imag))
                        / np.maximum(np.abs(old), 1e-300)))


#: The stop rule's second condition (:func:`settled`) applies only once no pole moves
#: by more than this fraction of its magnitude.
STALL_MOVE = 1e-3
#: Default residual tolerance of the stop rule's second condition (``rtol`` of
#: :func:`vector_fit`): chosen on the fixed cases of benchmarks/fit_vs_reference.py,
#: where stopping there left the attempt's normalised residual within 2e-4 of that
#: after 30 relocations.
STALL_RTOL = 1e-3


def settled(move: float, residuals: list[float], tol: float, rtol: float) -> bool:
    """The relocation's stop rule: True when the poles, or the fit they give, have settled.

    Evidence: ``move``, the largest relative pole move of the last relocation
    (:func:`_pole_change`), and ``residuals``, the weighted residual norm of
    the best fit with the poles that entered each relocation so far (free
    from each relocation's QR, :meth:`~benchfit.fitting.relocation.System.relocate`).
    Stop when ``move < tol``; or when ``rtol > 0``, ``move`` is below
    :data:`STALL_MOVE` and the residual changed by at most ``rtol`` of its
    value in each of the last two relocations.

    The second condition is ours (common practice, no source): relocation is a
    fixed-point iteration, and on ill-conditioned data its moves stop
    shrinking at rounding level (about 1e-7 on scikit-rf's ``line.s2p`` at
    order 8, where a pole-move tolerance of 1e-8 is met only by chance) or
    shrink only by a factor of about 0.7 per relocation (``ro,3.s1p`` at
    order 6, poles mirrored at every step), while the fit no longer changes.
    The move bound keeps it from stopping on a plateau a wandering pole may
    still leave: on the noisy converter plant at order 8 the residual changed
    by under 1e-4 for ten relocations while a spare pole moved by 10-100 %,
    then dropped by 14 %.  Two changes, not one, so a single coincidence in
    an oscillating iteration does not stop it.
    """
    if move < tol:
        return True
    if rtol <= 0 or move >= STALL_MOVE or len(residuals) < 3:
        return False
    r0, r1, r2 = residuals[-3:]
    return abs(r1 - r0) <= rtol * r1 and abs(r2 - r1) <= rtol * r2


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
    rtol: float = STALL_RTOL,
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
    tol, rtol
        Stop rule (:func:`settled`): the largest relative pole move is below
        ``tol``, or the weighted residual changed by at most ``rtol``
        (relative) in each of the last two relocations once no pole moves by
        :data:`STALL_MOVE` (0: poles only).
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
    poles = arrange(np.asarray(poles, dtype=complex))
    n_unknown = 2 * poles.shape[0] + 1 + int(direct) + int(proportional)
    if 2 * s.shape[0] < n_unknown:
        raise FitError(
            f"order {poles.shape[0]} needs at least {(n_unknown + 1) // 2} points; "
            f"the band holds {s.shape[0]}"
        )
    system = System(s, h, w, poles.shape[0], direct, proportional)
    converged = poles.shape[0] == 0  # nothing to relocate
    flipped = np.zeros(0, dtype=complex)
    it = 0
    resid: list[float] = []
    while not converged and it < max_iter:
        it += 1
        try:
            new, flipped, r = system.relocate(poles, mirror)
        except (linalg.LinAlgError, ValueError):
            break  # keep the last good poles; reported as not converged
        resid.append(r)
        converged = settled(_pole_change(poles, new), resid, tol, rtol)
        poles = new
    try:
        res, d, e, _, fitted = system.residues(poles)
    except (linalg.LinAlgError, ValueError) as exc:
        raise linalg.LinAlgError(f"vector fitting: residues not solvable ({exc})") from exc
    return VFResult(poles=poles, residues=res, d=d, e=e, iterations=it,
                    converged=converged, flipped=flipped, fitted=fitted)


def vf_to_zpk(vf: VFResult, scale: float) -> tuple[np.ndarray, np.ndarray, float]:
    """Zeros, poles and gain (scipy zpk, s in rad/s) of a scaled VF model.

    Zeros are the finite generalized eigenvalues of the system pencil
    ``[[A, B], [C, D]] - s·[[E, 0], [0, 0]]`` (a descriptor realisation that
    also covers the ``s·e`` term), which avoids forming polynomials.
    """
    p = vf.poles
    n = p.shape[0]
    # Real state-space form of the pole/residue model (the relocation's A and b).
    n_real = count_real(p)
    a, b = state_matrix(p, n_real)
    c = vf.residues.real.copy()
    c[n_real + 1::2] = vf.residues[n_real::2].imag
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
