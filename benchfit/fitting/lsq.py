"""Trust-region least squares for the refinements of one fit.

The refinements (:func:`benchfit.fitting.refine.refine`: the many trials that
compare χ² between candidate models, and the one a result reports) are small
(a dozen or two parameters, a few hundred to a few thousand residuals) and
called dozens of times per fit.  scipy's
trust-region solver (:func:`scipy.optimize.least_squares`, ``method="trf"``
without bounds, ``tr_solver="exact"``, ``x_scale="jac"``) spends most of such
a call on an SVD of the M × P Jacobian per iteration.  This is the same
algorithm — the same trust-region subproblem solved by the same Newton
iteration on the step length (J. J. Moré, "The Levenberg–Marquardt algorithm:
implementation and theory", Lecture Notes in Mathematics 630, 1978; scipy's
``solve_lsq_trust_region``), the same radius updates and stopping tests — with
the SVD of J replaced by a QR factorisation and the SVD of its small P × P
factor R (J = QR, R = U S Vᵀ: the same S and V; the subproblem needs only
those and S·Uᵀr = Vᵀ·Jᵀr, so Q is never formed).  The QR costs about a third
of the SVD of a tall matrix and keeps its accuracy (the normal matrix JᵀJ
would square the condition number, and trial fits here are often ill
conditioned).

With bounds, :func:`least_squares` tries the unbounded problem first (see
:func:`inactive_bounds`) and runs scipy's bounded TRF only when the bounds
matter.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from math import sqrt

import numpy as np
from scipy import optimize
from scipy.linalg.lapack import dgeqrf as _dgeqrf

_EPS = np.finfo(float).eps


@dataclass(frozen=True)
class LsqOutcome:
    """What :func:`trust_region` returns (field names and status codes as scipy's)."""

    x: np.ndarray
    fun: np.ndarray
    jac: np.ndarray
    nfev: int
    status: int  # 0: evaluation cap; 1: gtol; 2: ftol; 3: xtol; 4: ftol and xtol;
    #             5: the caller's ``settle`` threshold; -3: a step would have left the box
    #             (x is the last point inside)
    message: str


_MESSAGES = {-3: "A step would have left the bounds; stopped at the last point inside.",
             0: "The maximum number of function evaluations is exceeded.",
             1: "`gtol` termination condition is satisfied.",
             2: "`ftol` termination condition is satisfied.",
             3: "`xtol` termination condition is satisfied.",
             4: "Both `ftol` and `xtol` termination conditions are satisfied.",
             5: "The cost decrease of a step is below the caller's `settle` threshold."}


def _r_factor(a: np.ndarray) -> np.ndarray:
    """R of a = QR (P × P, upper triangular), Q never formed (LAPACK dgeqrf)."""
    qr, _, _, info = _dgeqrf(np.asfortranarray(a))
    if info != 0:
        raise np.linalg.LinAlgError(f"QR factorisation failed (info {info})")
    n = a.shape[1]
    return np.triu(qr[:n, :n])


def _norm(x: np.ndarray) -> float:
    """Euclidean norm of a vector (``np.linalg.norm`` without its dispatch: it is called
    tens of times per iteration here)."""
    return sqrt(float(x @ x))


def _subproblem(suf: np.ndarray, s2: np.ndarray, v: np.ndarray, delta: float, alpha: float,
                full_rank: bool) -> tuple[np.ndarray, float]:
    """Step of length ≤ ``delta`` minimising the quadratic model (scipy's
    ``solve_lsq_trust_region`` written with S² and S·Uᵀr = ``suf``)."""
    if full_rank:
        p = -v @ (suf / s2)
        if _norm(p) <= delta:
            return p, 0.0
    suf2 = suf * suf

    def phi(a: float) -> tuple[float, float]:
        inv = 1.0 / (s2 + a)
        w = suf2 * inv * inv
        p_norm = sqrt(float(w.sum()))
        return p_norm - delta, -float(w @ inv) / p_norm

    alpha_upper = _norm(suf) / delta
    if full_rank:
        ph0, dph0 = phi(0.0)
        alpha_lower = -ph0 / dph0
    else:
        alpha_lower = 0.0
    if not full_rank and alpha == 0.0:
        alpha = max(0.001 * alpha_upper, (alpha_lower * alpha_upper) ** 0.5)
    for _ in range(10):
        if alpha < alpha_lower or alpha > alpha_upper:
            alpha = max(0.001 * alpha_upper, (alpha_lower * alpha_upper) ** 0.5)
        ph, dph = phi(alpha)
        if ph < 0:
            alpha_upper = alpha
        ratio = ph / dph
        alpha_lower = max(alpha_lower, alpha - ratio)
        alpha -= (ph + delta) * ratio / delta
        if abs(ph) < 0.01 * delta:
            break
    p = -v @ (suf / (s2 + alpha))
    return p * (delta / _norm(p)), alpha


def trust_region(fun: Callable[[np.ndarray], np.ndarray],
                 jac: Callable[[np.ndarray], np.ndarray], x0: np.ndarray, *,
                 max_nfev: int, f0: np.ndarray | None = None, ftol: float = 1e-9,
                 xtol: float = 1e-9, gtol: float = 1e-10,
                 box: tuple[np.ndarray, np.ndarray] | None = None,
                 settle: Callable[[float], float] | None = None) -> LsqOutcome:
    """Minimise ½‖fun(x)‖² from ``x0`` (no bounds), as scipy's TRF with ``x_scale="jac"``.

    Parameters
    ----------
    fun, jac
        Residual vector and its Jacobian (M × P) at ``x``; the Jacobian is
        asked for only at accepted points, right after ``fun`` at the same x.
    x0
        Start.
    max_nfev
        Cap on evaluations of ``fun``.
    f0
        ``fun(x0)`` when the caller has it already (counted as the first evaluation).
    ftol, xtol, gtol
        scipy's stopping tests: relative reduction of the cost under ``ftol``
        on a step that went well, a step under ``xtol`` relative to x, the
        gradient's largest component under ``gtol``.
    settle
        ``settle(cost)``: a further stop, the decrease of the cost ½‖f‖² below
        which a step that went well (ratio of actual to predicted decrease
        over 0.25, as for ``ftol``) ends the search, given the cost before the
        step; it stops with status 5 at the point the step reached, or where
        it is, before a step, when the whole cost is below the threshold.
    """
    x = np.array(x0, dtype=float)
    f = fun(x) if f0 is None else np.asarray(f0, dtype=float)
    nfev = 1
    j = jac(x)
    m = f.shape[0]
    cost = 0.5 * float(f @ f)
    g = j.T @ f
    scale_inv = np.sqrt(np.einsum("ij,ij->j", j, j))
    scale_inv[scale_inv == 0] = 1.0
    delta = _norm(x * scale_inv) or 1.0
    alpha = 0.0
    status = None
    while True:
        if np.max(np.abs(g), initial=0.0) < gtol:
            status = 1
        elif settle is not None and cost < settle(cost):
            status = 5  # no step could lower the cost by the caller's threshold
        if status is not None or nfev >= max_nfev:
            break
        d = 1.0 / scale_inv
        g_h = d * g
        r_h = _r_factor(j * d)
        _, s, vt = np.linalg.svd(r_h)
        v = vt.T
        s2 = s * s
        full_rank = bool(s[-1] > _EPS * m * s[0])
        suf = v.T @ g_h
        reduction = -1.0
        while reduction <= 0 and nfev < max_nfev:
            step_h, alpha = _subproblem(suf, s2, v, delta, alpha, full_rank)
            rs = r_h @ step_h
            predicted = -(0.5 * float(rs @ rs) + float(g_h @ step_h))
            step = d * step_h
            x_new = x + step
            f_new = fun(x_new)
            nfev += 1
            step_h_norm = _norm(step_h)
            if not np.all(np.isfinite(f_new)):
                delta = 0.25 * step_h_norm
                continue
            cost_new = 0.5 * float(f_new @ f_new)
            reduction = cost - cost_new
            if predicted > 0:
                ratio = reduction / predicted
            else:
                ratio = 1.0 if predicted == reduction == 0 else 0.0
            delta_new = delta
            if ratio < 0.25:
                delta_new = 0.25 * step_h_norm
            elif ratio > 0.75 and step_h_norm > 0.95 * delta:
                delta_new = 2.0 * delta
            ftol_ok = reduction < ftol * cost and ratio > 0.25
            xtol_ok = _norm(step) < xtol * (xtol + _norm(x))
            if ftol_ok or xtol_ok:
                status = 4 if ftol_ok and xtol_ok else 2 if ftol_ok else 3
                break
            if settle is not None and ratio > 0.25 and 0 < reduction < settle(cost):
                status = 5
                break
            alpha *= delta / delta_new
            delta = delta_new
        if reduction > 0 and box is not None and not (
                np.all(x_new >= box[0]) and np.all(x_new <= box[1])):
            status = -3
            break
        if reduction > 0:
            x, f, cost = x_new, f_new, cost_new
            j = jac(x)
            g = j.T @ f
            scale_inv = np.maximum(scale_inv, np.sqrt(np.einsum("ij,ij->j", j, j)))
    status = 0 if status is None else status
    return LsqOutcome(x=x, fun=f, jac=j, nfev=nfev, status=status, message=_MESSAGES[status])


def inactive_bounds(out: LsqOutcome, lower: np.ndarray, upper: np.ndarray) -> bool:
    """True when an unbounded optimum ``out`` is also the optimum within the bounds.

    Evidence weighed: the unbounded search stopped on a convergence test (not
    at its evaluation cap) at a point strictly inside ``lower``..``upper``.
    A local minimum of the unbounded problem that lies inside the feasible
    box is a local minimum of the bounded one, with every constraint inactive
    (Karush–Kuhn–Tucker conditions with zero multipliers, e.g. J. Nocedal and
    S. J. Wright, *Numerical Optimization*, 2nd ed., sec. 12.3); scipy's
    bounded solver started at the same point would end there too, to within
    its tolerances (its steps are scaled by the distance to the bounds, so the
    iterates differ).  A point outside, on a bound, or a search that ran out
    of evaluations says nothing about the bounded optimum.
    """
    x = out.x
    return bool(out.status > 0 and np.all(x > lower) and np.all(x < upper))


def least_squares(fun: Callable[[np.ndarray], np.ndarray],
                  jac: Callable[[np.ndarray], np.ndarray], x0: np.ndarray,
                  lower: np.ndarray, upper: np.ndarray, *, max_nfev: int,
                  f0: np.ndarray | None = None, ftol: float = 1e-9, xtol: float = 1e-9,
                  gtol: float = 1e-10, settle: Callable[[float], float] | None = None
                  ) -> LsqOutcome:
    """Minimise ½‖fun(x)‖² within ``lower``..``upper`` (±inf: no bound), from ``x0`` inside.

    Without finite bounds this is :func:`trust_region`.  With them, the
    unbounded problem is solved first, stopped where a step would leave the
    bounds; when it reaches an optimum inside (:func:`inactive_bounds`) that
    is the result.  Otherwise scipy's bounded trust-region reflective solver
    (``scipy.optimize.least_squares``, ``method="trf"``, ``x_scale="jac"``:
    lmfit's ``least_squares`` method) goes on from the last point inside, with
    what is left of ``max_nfev`` (at least half of it); the evaluations of both
    runs are counted.  A held-stable fit (every pole bounded at zero) whose
    data want no right-half-plane pole so skips the bounded solver's SVD per
    iteration, and one that does want it loses no evaluations on the way out.
    """
    lower, upper = np.asarray(lower, dtype=float), np.asarray(upper, dtype=float)
    bounded = bool(np.any(np.isfinite(lower)) or np.any(np.isfinite(upper)))
    free = trust_region(fun, jac, x0, max_nfev=max_nfev, f0=f0, ftol=ftol, xtol=xtol, gtol=gtol,
                        box=(lower, upper) if bounded else None, settle=settle)
    if not bounded or inactive_bounds(free, lower, upper) or (
            free.status == 0 and free.nfev >= max_nfev):
        return free
    if settle is not None:
        # scipy's ftol is relative to the cost: the threshold at the point handed over
        cost = 0.5 * float(free.fun @ free.fun)
        ftol = min(max(ftol, settle(cost) / cost), 0.1) if cost > 0 else ftol
    out = optimize.least_squares(fun, free.x, jac=jac, bounds=(lower, upper), method="trf",
                                 x_scale="jac", ftol=ftol, xtol=xtol, gtol=gtol,
                                 max_nfev=max(max_nfev - free.nfev, max_nfev // 2))
    return LsqOutcome(x=out.x, fun=out.fun, jac=out.jac, nfev=free.nfev + int(out.nfev),
                      status=int(out.status), message=str(out.message))
