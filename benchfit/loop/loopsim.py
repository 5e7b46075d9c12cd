"""State-space form of a rational model and its exact simulation with a whole-step delay.

The loop gain is T(s) = L(s)·e^(-sτ) with L rational.  :func:`state_space`
turns L into a cascade of first- and second-order sections (better
conditioned than one companion form when poles span many decades).  The
simulators run on a fixed step h with the delay a whole number of steps,
τ = N·h; over each step the input is a straight line between its values at
the two ends (first-order hold) and the state update uses the exact matrix
exponential of that input, so no Padé or other rational stand-in for the
delay is used.  Jumps are kept exact by carrying the value just before and
just after every sample instant.  The callers are in
:mod:`benchfit.loop.timeresponse`.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import linalg, signal

from benchfit.errors import InputError
from benchfit.fitting.model import PlantModel


# ----------------------------------------------------------------------------- state space
def _factors(roots: np.ndarray) -> list[np.ndarray]:
    """Real monic polynomial factors (degree 1 or 2) of a set of conjugate-closed roots."""
    roots = np.asarray(roots, dtype=complex)
    out: list[np.ndarray] = []
    real = roots[np.abs(roots.imag) <= 1e-9 * np.maximum(np.abs(roots), 1e-300)]
    upper = roots[roots.imag > 1e-9 * np.maximum(np.abs(roots), 1e-300)]
    lower = roots[roots.imag < -1e-9 * np.maximum(np.abs(roots), 1e-300)]
    if upper.size != lower.size:
        raise InputError("poles/zeros are not in conjugate pairs; the model is not a real system")
    for r in upper:
        out.append(np.array([1.0, -2.0 * r.real, abs(r) ** 2]))
    for r in real:
        out.append(np.array([1.0, -r.real]))
    return out


def state_space(model: PlantModel) -> tuple[np.ndarray, np.ndarray, np.ndarray, float]:
    """(A, B, C, D) of the rational part of ``model`` as a cascade of small sections.

    Raises
    ------
    InputError
        When the model has more zeros than poles (not proper).
    """
    if model.zeros.size > model.poles.size:
        raise InputError(f"the model has {model.zeros.size} zeros and {model.poles.size} poles; "
                         "a time response needs a proper model (zeros <= poles)")
    pf = sorted(_factors(model.poles), key=lambda c: abs(c[-1]) ** (1 / (len(c) - 1)))
    zf = sorted(_factors(model.zeros), key=lambda c: -len(c))          # quadratics first
    # sections: pair real poles into quadratics so each section can take two zero orders
    sections: list[list[np.ndarray]] = []
    singles = [c for c in pf if len(c) == 2]
    for c in pf:
        if len(c) == 3:
            sections.append([c])
    while len(singles) >= 2:
        sections.append([singles.pop(0), singles.pop(0)])
    if singles:
        sections.append([singles.pop(0)])
    dens = [np.polymul(*s) if len(s) == 2 else s[0] for s in sections]
    nums: list[np.ndarray] = [np.array([1.0]) for _ in dens]
    for z in zf:
        wz = abs(z[-1]) ** (1 / (len(z) - 1)) if z[-1] != 0 else 0.0
        best, best_d = None, math.inf
        for i, d in enumerate(dens):
            if len(nums[i]) - 1 + len(z) - 1 <= len(d) - 1:
                wd = abs(d[-1]) ** (1 / (len(d) - 1)) if d[-1] != 0 else 0.0
                dist = abs(math.log10((wz + 1e-300) / (wd + 1e-300)))
                if dist < best_d:
                    best, best_d = i, dist
        if best is None:
            raise InputError("cannot arrange the model's zeros into proper sections")
        nums[best] = np.polymul(nums[best], z)
    A = np.zeros((0, 0))
    B = np.zeros((0, 1))
    C = np.zeros((1, 0))
    D = float(model.k)
    first = True
    for num, den in zip(nums, dens, strict=True):
        a, b, c, d = signal.tf2ss(num, den)
        d = float(np.atleast_2d(d)[0, 0])
        if first:   # the whole gain enters at the first section
            A, B, C, D = a, b * model.k, c, d * model.k
            first = False
            continue
        n1, n2 = A.shape[0], a.shape[0]
        A = np.block([[A, np.zeros((n1, n2))], [b @ C, a]])
        B = np.vstack([B, b * D])
        C = np.hstack([d * C, c])
        D = d * D
    return A, B, C, float(D)


def _foh(A: np.ndarray, B: np.ndarray, h: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Exact update for a straight-line input over one step (triangle hold).

    x[k+1] = Φ x[k] + Γ1 u[k] + Γ2 (u[k+1] - u[k]), from the exponential of
    the augmented matrix [[A h, B h, 0], [0, 0, I], [0, 0, 0]].
    """
    n, m = A.shape[0], B.shape[1]
    M = np.zeros((n + 2 * m, n + 2 * m))
    M[:n, :n] = A * h
    M[:n, n:n + m] = B * h
    M[n:n + m, n + m:] = np.eye(m)
    E = linalg.expm(M)
    return E[:n, :n], E[:n, n:n + m], E[:n, n + m:]


def simulate(A, B, C, D, N: int, h: float, w_plus: np.ndarray, w_minus: np.ndarray):
    """Closed loop e = w - z, z = L(e delayed by N steps); returns (e, z) just after each sample.

    ``w_plus[k]``/``w_minus[k]`` are the input just after / before t_k.
    """
    n = w_plus.size
    if A.shape[0] == 0:            # static loop: z = D e(t - τ)
        A = np.zeros((1, 1))
        B = np.zeros((1, 1))
        C = np.zeros((1, 1))
    if N == 0:
        if abs(1.0 + D) < 1e-12:
            raise InputError("1 + T(∞) = 0: the loop has an algebraic loop with gain -1")
        Acl = A - B @ C / (1.0 + D)
        Bcl = B / (1.0 + D)
        phi, g1, g2 = _foh(Acl, Bcl, h)
        g1, g2 = g1[:, 0], g2[:, 0]
        x = np.zeros(A.shape[0])
        cx = np.empty(n)
        for k in range(n):
            cx[k] = C[0] @ x
            if k + 1 < n:
                x = phi @ x + g1 * w_plus[k] + g2 * (w_minus[k + 1] - w_plus[k])
        z = (cx + D * w_plus) / (1.0 + D)
        return w_plus - z, z
    phi, g1, g2 = _foh(A, B, h)
    g1, g2 = g1[:, 0], g2[:, 0]
    c = C[0]
    e_plus = np.zeros(n)
    e_minus = np.zeros(n)
    z_plus = np.zeros(n)
    x = np.zeros(A.shape[0])
    for k in range(n):
        j = k - N
        ua = e_plus[j] if j >= 0 else 0.0
        um = e_minus[j] if j >= 0 else 0.0
        cx = c @ x
        z_plus[k] = cx + D * ua
        e_plus[k] = w_plus[k] - z_plus[k]
        e_minus[k] = w_minus[k] - (cx + D * um)
        ub = e_minus[j + 1] if j + 1 >= 0 else 0.0
        x = phi @ x + g1 * ua + g2 * (ub - ua)
    return e_plus, z_plus


def sensitivity_step(z_open: PlantModel, A, B, C, D, h: float, n: int, size: float) -> np.ndarray:
    """Exact samples of S·Z_ol·(size × step) for a loop without delay (one rational system)."""
    Az, Bz, Cz, Dz = state_space(z_open)
    if abs(1.0 + D) < 1e-12:
        raise InputError("1 + T(∞) = 0: the loop has an algebraic loop with gain -1")
    Acl = A - B @ C / (1.0 + D)
    Bcl = B / (1.0 + D)
    nz, nl = Az.shape[0], A.shape[0]
    # series: Z_ol drives the sensitivity; output e = (w - C x)/(1 + D), w = Cz xz + Dz u
    Aa = np.block([[Az, np.zeros((nz, nl))], [Bcl @ Cz, Acl]])
    Ba = np.vstack([Bz, Bcl * Dz])
    Ca = np.hstack([Cz, -C]) / (1.0 + D)
    Da = Dz / (1.0 + D)
    out = np.empty(n)
    if Aa.shape[0] == 0:
        out[:] = Da * size
        return out
    phi, g1, _ = _foh(Aa, Ba, h)
    x = np.zeros(Aa.shape[0])
    for k in range(n):
        out[k] = Ca[0] @ x + Da * size
        x = phi @ x + g1[:, 0] * size
    return out


def step_samples(model: PlantModel, h: float, n: int, size: float) -> tuple[np.ndarray, np.ndarray]:
    """Exact samples of ``size`` × step response of a rational model (values after/before t_k)."""
    if model.delay_s:
        raise InputError("the open-loop impedance model must not have a delay")
    A, B, C, D = state_space(model)
    after = np.empty(n)
    if A.shape[0] == 0:
        after[:] = D * size
    else:
        phi, g1, _ = _foh(A, B, h)
        x = np.zeros(A.shape[0])
        for k in range(n):
            after[k] = C[0] @ x + D * size
            x = phi @ x + g1[:, 0] * size
    before = after.copy()
    before[0] = 0.0
    return after, before
