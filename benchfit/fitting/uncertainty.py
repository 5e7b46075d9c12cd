"""Parameter covariance from the Jacobian at the optimum, reported only when it is real.

The linearised covariance of a weighted least-squares fit is
``(JᵀJ)⁻¹ · χ²_red`` (J: Jacobian of the normalised residuals; e.g. W. H. Press
et al., *Numerical Recipes*, 3rd ed., sec. 15.4 and 15.5).  Formed as the
inverse of JᵀJ it loses everything when J is ill conditioned: the normal
matrix squares the condition number, and past 1/eps its inverse has negative
diagonal entries and correlations beyond ±1.  Here it comes from the singular
value decomposition of J with its columns scaled to unit norm (the scaling
removes the Hz-versus-Q spread of units, so the condition number measures how
nearly two parameters do the same thing to the response)::

    J·D⁻¹ = U S Vᵀ     cov = D⁻¹ V S⁻² Vᵀ D⁻¹ · χ²_red

which is positive semi-definite by construction.  When the scaled J is not
well conditioned (:data:`COND_MAX`), the parameter that moves most along the
least determined direction is named *not determined* and set aside, until the
rest is well conditioned; the covariance of the rest is then the one with the
set-aside parameters held at their values, and :func:`covariance` says so.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

#: Largest condition number of the column-scaled Jacobian for which the covariance is
#: reported.  The singular values of J are computed to about eps·cond(J) relative
#: accuracy (G. H. Golub and C. F. Van Loan, *Matrix Computations*, 4th ed., sec. 8.6),
#: so at 1e8 the smallest is known to ~1e-8; the margin below 1/eps also leaves room
#: for the optimum not being exact.  Beyond it two combinations of parameters change
#: the response alike to one part in 1e8: the data cannot tell them apart.
COND_MAX = 1e8


@dataclass(frozen=True)
class Covariance:
    """Outcome of :func:`covariance`.

    Attributes
    ----------
    matrix
        (P, P) covariance of the varied parameters; rows and columns of the
        parameters not determined are NaN.
    undetermined
        Indices (into the varied parameters) the data cannot determine.
    condition
        Condition number of the column-scaled Jacobian, all varied parameters.
    reason
        Why some are not determined ("" when none is).
    """

    matrix: np.ndarray
    undetermined: tuple[int, ...]
    condition: float
    reason: str

    @property
    def stderr(self) -> np.ndarray:
        """One-sigma errors (NaN for the parameters not determined)."""
        return np.sqrt(np.diag(self.matrix))


def covariance(jac: np.ndarray, redchi: float, cond_max: float = COND_MAX) -> Covariance:
    """Covariance of the parameters from the Jacobian of the normalised residuals.

    Parameters
    ----------
    jac
        (M, P) real Jacobian at the optimum (residuals divided by their σ).
    redchi
        Reduced χ² the covariance is scaled by (the σ's scale is estimated).
    cond_max
        Condition number of the column-scaled Jacobian above which parameters
        are set aside as not determined (:data:`COND_MAX`).

    Returns
    -------
    Covariance
        Positive semi-definite on the determined parameters.
    """
    jac = np.asarray(jac, dtype=float)
    p = jac.shape[1]
    out = np.full((p, p), np.nan)
    if p == 0:
        return Covariance(out, (), 1.0, "")
    if not (np.isfinite(redchi) and redchi >= 0) or not np.all(np.isfinite(jac)):
        return Covariance(out, tuple(range(p)), np.inf,
                          "the Jacobian or χ² at the optimum is not finite")
    norms = np.sqrt(np.einsum("ij,ij->j", jac, jac))
    active = [i for i in range(p) if norms[i] > 0.0]
    dead = [i for i in range(p) if norms[i] == 0.0]
    cond_all = np.inf if dead else None
    vt = s = None
    while active:
        # S and V of the tall J from its small R factor (J = QR, R = U S Vᵀ): the
        # same numbers at a fraction of the cost of the tall SVD.
        r = np.linalg.qr(jac[:, active] / norms[active], mode="r")
        _, s, vt = np.linalg.svd(r)
        cond = s[0] / s[-1] if s[-1] > 0 else np.inf
        if cond_all is None:
            cond_all = cond
        if cond <= cond_max:
            break
        # The least determined direction is the last right singular vector; the
        # parameter with the largest share of it is the one the data cannot place.
        active.pop(int(np.argmax(np.abs(vt[-1]))))
    if active:
        d = 1.0 / norms[active]
        c = (vt.T / s ** 2) @ vt * np.outer(d, d) * redchi
        out[np.ix_(active, active)] = 0.5 * (c + c.T)
    undetermined = tuple(sorted(set(range(p)) - set(active)))
    reason = ""
    if undetermined:
        why = []
        if dead:
            why.append("the response does not depend on them" if len(dead) == len(undetermined)
                       else "some do not change the response at all")
        if len(dead) < len(undetermined):
            why.append(f"they change the response almost exactly as other parameters do "
                       f"(condition number {cond_all:.2g} of the scaled Jacobian, above "
                       f"{cond_max:.0e})")
        reason = "; ".join(why)
    return Covariance(out, undetermined, float(np.inf if cond_all is None else cond_all), reason)


#: A parameter within this relative distance of one of its bounds sits on it
#: (common practice, no source: far below any σ the data give, above the
#: optimiser's own tolerance of 1e-9 on the step).
AT_BOUND_REL = 1e-6


def on_bound(values: np.ndarray, lower: np.ndarray, upper: np.ndarray,
             rel: float = AT_BOUND_REL) -> np.ndarray:
    """Which parameters sit on a bound (within ``rel`` of it, relative to its size).

    The linearised covariance assumes the optimum is a free minimum, where the
    gradient of χ² is zero; on an active bound it is not (the data would pull
    the parameter further), so neither its σ nor its correlations mean
    anything.  Evidence weighed: only the distance to the bound, relative to
    the larger of the bound and the value (absolute zero for a bound at 0).

    Parameters
    ----------
    values, lower, upper
        Values and their bounds (±inf for none), same shape.
    rel
        Relative distance counted as on the bound (:data:`AT_BOUND_REL`).

    Returns
    -------
    ndarray of bool
    """
    v = np.asarray(values, dtype=float)
    out = np.zeros(v.shape, dtype=bool)
    for b in (np.asarray(lower, dtype=float), np.asarray(upper, dtype=float)):
        fin = np.isfinite(b)
        with np.errstate(invalid="ignore"):
            near = np.abs(v - b) <= rel * np.maximum(np.abs(b), np.abs(v))
        out |= fin & near
    return out


def held_covariance(jac: np.ndarray, redchi: float, held: np.ndarray,
                    cond_max: float = COND_MAX) -> Covariance:
    """:func:`covariance` with the ``held`` columns (parameters on a bound) set aside.

    The others' covariance is the one with the held parameters at their
    values; the held rows and columns are NaN (JSON null), and they are not
    listed as undetermined (their reason is the bound, not the data).
    """
    jac = np.asarray(jac, dtype=float)
    held = np.asarray(held, dtype=bool)
    if not held.any():
        return covariance(jac, redchi, cond_max)
    p = jac.shape[1]
    free = np.flatnonzero(~held)
    sub = covariance(jac[:, free], redchi, cond_max)
    out = np.full((p, p), np.nan)
    out[np.ix_(free, free)] = sub.matrix
    return Covariance(out, tuple(int(free[k]) for k in sub.undetermined), sub.condition,
                      sub.reason)


#: A σ above this multiple of its parameter's magnitude is not reported (see
#: :func:`beyond_linear`; common practice, no source).
SIGMA_REL_MAX = 100.0


def beyond_linear(values: np.ndarray, stderr: np.ndarray, rel_max: float = SIGMA_REL_MAX
                  ) -> np.ndarray:
    """Which standard errors are too large to mean anything (boolean mask).

    Evidence weighed: each σ against its parameter's magnitude.  The linearised
    covariance describes χ² near the optimum; a σ of ``rel_max`` times the value
    (a pole at 6.5 MHz ± 1.1 THz) spans both signs of the parameter and decades
    where the response is nothing like linear in it.  The data only bound such a
    parameter loosely, and the figure would read as a measurement: it is named
    *not determined* instead.  A NaN σ (fixed, or set aside already) is not flagged.
    """
    v = np.abs(np.asarray(values, dtype=float))
    sd = np.asarray(stderr, dtype=float)
    with np.errstate(invalid="ignore"):
        return np.isfinite(sd) & (sd > rel_max * v)


def correlation(cov: np.ndarray) -> np.ndarray:
    """Correlation matrix of a covariance: within [−1, 1], 1 on the whole diagonal.

    A parameter without a variance (not determined: a NaN row) has NaN
    correlations with the others (JSON null) and 1 with itself; so has a
    zero variance (a parameter known exactly, which the construction above
    does not produce) rather than a division by zero.
    """
    cov = np.asarray(cov, dtype=float)
    if cov.size == 0:
        return cov.copy()
    d = np.sqrt(np.diag(cov))
    with np.errstate(all="ignore"):
        corr = cov / np.outer(d, d)
    corr = np.clip(corr, -1.0, 1.0)  # rounding only: cov is PSD
    corr[np.diag_indices(corr.shape[0])] = 1.0
    return corr
