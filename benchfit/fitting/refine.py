"""Nonlinear least-squares refinement of the physical parameters (lmfit).

Vector fitting's fixed point is not the least-squares optimum (Lefteriu &
Antoulas, "On the convergence of the vector-fitting algorithm", IEEE Trans.
MTT 61(4), 2013), so the VF model is only a starting point.  Here the
physical parameters are refined on the complex log response: the residual of
a point is ``ln(H_model/H_data)``, whose real part is the magnitude error in
nepers and whose imaginary part is the phase of the ratio (wrapped, never a
difference of unwrapped phases), each divided by its σ.  The Jacobian is
analytic (:func:`benchfit.fitting.parameters.log_jacobian`, evaluated by
:mod:`benchfit.fitting.factors`).

With ``weighting="absolute"`` the residual is the plain complex error
``(H_model − H_data)/σ_abs`` instead.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import lmfit
import numpy as np
from scipy import optimize

from benchfit.errors import InputError
from benchfit.fitting.factors import log_jacobian_at, log_response
from benchfit.fitting.lsq import trust_region
from benchfit.fitting.parameters import Structure, log_jacobian, renumbering, response
from benchfit.fitting.uncertainty import held_covariance, on_bound

#: Residual given to a point where a trial model does not evaluate.
_PENALTY = 1e6


@dataclass(frozen=True)
class Refined:
    """Outcome of :func:`refine`."""

    values: np.ndarray
    stderr: np.ndarray          # NaN for fixed parameters or when not determined
    varied: tuple[str, ...]     # names of the varied parameters, covariance order
    covariance: np.ndarray      # (n_varied, n_varied), scaled by reduced chi-square;
    #                             NaN rows/columns for the parameters not determined
    evaluations: int
    success: bool
    chisqr: float
    redchi: float
    message: str
    undetermined: tuple[str, ...] = ()  # varied parameters the data cannot determine
    uncertainty_reason: str = ""  # why they are not, or why no σ at all ("" when all are given)
    at_bound: tuple[str, ...] = ()  # varied parameters that ended on a bound (no σ: see on_bound)

    @property
    def uncertainty_note(self) -> str:
        """A warning for the user when some σ are not given ("" when all are)."""
        if not self.undetermined:
            return self.uncertainty_reason
        rest = len(self.undetermined) < len(self.varied)
        return (f"not determined by the data: {', '.join(self.undetermined)}: "
                f"{self.uncertainty_reason}; no σ is given for them"
                + (", and the others' σ hold them at their values" if rest else ""))


def wrap(x: np.ndarray) -> np.ndarray:
    """Angle wrapped to (−π, π]."""
    return np.pi - np.mod(np.pi - x, 2.0 * np.pi)


def log_residual(st: Structure, values, s, log_h) -> np.ndarray:
    """ln(H_model/H_data) with the phase part wrapped; complex, one per point."""
    d = log_response(st, values, s)[0] - log_h
    return d.real + 1j * wrap(d.imag)


def refine(
    st: Structure,
    values0: np.ndarray,
    s: np.ndarray,
    h: np.ndarray,
    sig_mag: np.ndarray,
    sig_phase: np.ndarray,
    *,
    fix: dict[str, float] | None = None,
    bounds: dict[str, tuple[float, float]] | None = None,
    weighting: str = "relative",
    sig_abs: np.ndarray | None = None,
    max_nfev: int = 400,
    quick: bool = False,
) -> Refined:
    """Refine parameter values by weighted nonlinear least squares.

    Parameters
    ----------
    st, values0
        Model structure and starting values (see :mod:`parameters`).
    s, h
        Complex frequency ``jω`` (rad/s) and measured response.
    sig_mag, sig_phase
        Per-point σ of ln|H| and of phase (rad).
    fix
        Parameters held at a given value, by name.
    bounds
        (lower, upper) per parameter name.
    weighting
        ``"relative"`` (log residual) or ``"absolute"`` (complex residual / ``sig_abs``).
    max_nfev
        Cap on residual evaluations.
    quick
        Call scipy's trust-region least squares directly, without lmfit's
        parameter objects: the same algorithm, options and outcome, at a
        fraction of the overhead per call.  For the many trial refinements
        that only compare χ² between candidate models; the refinement a fit
        reports goes through lmfit.
    """
    names = st.names
    fix = dict(fix or {})
    bounds = dict(bounds or {})
    for key in list(fix) + list(bounds):
        if key not in names:
            raise InputError(f"no parameter {key!r} in this model; it has {', '.join(names)}",
                             source="--fix" if key in fix else "--bound")
    params = lmfit.Parameters()
    v0 = start_beside_fixed(st, np.array(values0, dtype=float), fix, bounds)
    for i, name in enumerate(names):
        if name in fix:
            v0[i] = float(fix[name])
        lo, hi = bounds.get(name, (-np.inf, np.inf))
        val = min(max(v0[i], lo), hi)
        params.add(name, value=val, vary=name not in fix, min=lo, max=hi)
    var_idx = np.array([i for i, n in enumerate(names) if n not in fix], dtype=int)
    n_s = s.shape[0]
    log_h = np.log(h.astype(complex))
    w_m, w_p = 1.0 / sig_mag, 1.0 / sig_phase
    absolute = weighting == "absolute"
    w_a = None if not absolute else 1.0 / (sig_abs if sig_abs is not None else np.ones(n_s))

    def current(p) -> np.ndarray:
        if isinstance(p, np.ndarray):  # the quick path's varied values
            v = v0.copy()
            v[var_idx] = p
            return v
        v = v0.copy()
        for i in var_idx:
            v[i] = p[names[i]].value
        return v

    last: list = [None]  # factor terms of the last residual, for the Jacobian at that point

    def residual(p):
        v = current(p)
        with np.errstate(all="ignore"):
            if absolute:
                d = (response(st, v, s) - h) * w_a
                out = np.concatenate([d.real, d.imag])
            else:
                lg, last[0] = log_response(st, v, s)
                d = lg - log_h
                out = np.concatenate([d.real * w_m, wrap(d.imag) * w_p])
        # A trial step onto a singular model (a frequency at 0...) must look bad, not NaN.
        return np.where(np.isfinite(out), out, _PENALTY)

    def jacobian(p):
        v = current(p)
        with np.errstate(all="ignore"):
            if absolute:
                j = log_jacobian(st, v, s)[:, var_idx]
                j = j * (response(st, v, s) * w_a)[:, None]
                out = np.vstack([j.real, j.imag])
            else:
                terms = last[0]
                if terms is None or not np.array_equal(terms.values, v):
                    terms = log_response(st, v, s)[1]
                jt = log_jacobian_at(st, terms, s)[var_idx]
                out = np.empty((var_idx.size, 2 * n_s))
                out[:, :n_s] = jt.real * w_m
                out[:, n_s:] = jt.imag * w_p
                out = out.T
        return np.where(np.isfinite(out), out, 0.0)

    if quick and var_idx.size:
        return _quick(names, v0, var_idx, residual, jacobian, bounds, max_nfev)
    if var_idx.size == 0:
        r = residual(params)
        chi = float(r @ r)
        return Refined(values=v0, stderr=np.full(len(names), np.nan), varied=(),
                       covariance=np.zeros((0, 0)), evaluations=1, success=True,
                       chisqr=chi, redchi=chi / max(r.size, 1), message="all parameters fixed")
    first: list[np.ndarray] = []

    def recorded(p):
        r = residual(p)
        if not first:
            first.append(r)  # the start's residual, to judge the outcome against
        return r

    mini = lmfit.Minimizer(recorded, params, nan_policy="raise")
    # Trust-region reflective least squares (lmfit's "least_squares" method), with
    # the analytic Jacobian and Jacobian-based scaling of the parameters (Hz and Q
    # differ by six decades).  Not MINPACK's lmder: it crashed the process on
    # some trial steps here.
    with np.errstate(all="ignore"):
        out = mini.least_squares(jac=lambda p, *a, **k: jacobian(p), max_nfev=max_nfev,
                                 x_scale="jac", ftol=1e-9, xtol=1e-9, gtol=1e-10)
    vals = current(out.params)
    r0 = first[0] if first else residual(params)
    if not np.all(np.isfinite(out.residual)) or out.chisqr > 1.001 * float(r0 @ r0) + 1e-300:
        # The search wandered off (a badly under-modelled start): keep the start.
        return _kept_start(names, v0, tuple(out.var_names), r0, int(out.nfev))
    varied = tuple(out.var_names)
    return _with_covariance(names, vals, [names.index(n) for n in varied], jacobian(vals[var_idx]),
                            int(out.nfev), bool(out.success), float(out.chisqr),
                            float(out.redchi), str(out.message), bounds)


def _with_covariance(names, values: np.ndarray, var_idx, jac: np.ndarray, nfev: int,
                     success: bool, chisqr: float, redchi: float, message: str,
                     bounds: dict[str, tuple[float, float]] | None = None) -> Refined:
    """A :class:`Refined` whose σ and covariance come from ``jac`` at ``values``
    (:func:`benchfit.fitting.uncertainty.covariance`: only what the data determine;
    a parameter on one of its ``bounds`` gets none, :func:`~benchfit.fitting.uncertainty.on_bound`)."""
    var_idx = np.asarray(var_idx, dtype=int)
    varied = tuple(names[i] for i in var_idx)
    bounds = bounds or {}
    lo = np.array([bounds.get(n, (-np.inf, np.inf))[0] for n in varied], dtype=float)
    hi = np.array([bounds.get(n, (-np.inf, np.inf))[1] for n in varied], dtype=float)
    held = on_bound(values[var_idx], lo, hi)
    cov = held_covariance(jac, redchi, held)
    stderr = np.full(len(names), np.nan)
    stderr[var_idx] = cov.stderr
    return Refined(values=values, stderr=stderr, varied=varied, covariance=cov.matrix,
                   evaluations=nfev, success=success, chisqr=chisqr, redchi=redchi,
                   message=message, undetermined=tuple(varied[k] for k in cov.undetermined),
                   uncertainty_reason=cov.reason,
                   at_bound=tuple(varied[k] for k in np.flatnonzero(held)))


def _quick(names, v0: np.ndarray, var_idx: np.ndarray, residual, jacobian,
           bounds: dict[str, tuple[float, float]], max_nfev: int) -> Refined:
    """:func:`refine` without lmfit (``quick=True``).

    The trust-region method of the lmfit call above (TRF, analytic Jacobian,
    Jacobian scaling, same tolerances): without bounds through
    :func:`benchfit.fitting.lsq.trust_region` (the same algorithm on the normal
    matrix instead of an SVD per iteration), with bounds through
    ``scipy.optimize.least_squares``.  The covariance is
    :func:`benchfit.fitting.uncertainty.covariance`'s.
    """
    lo = np.array([bounds.get(names[i], (-np.inf, np.inf))[0] for i in var_idx], dtype=float)
    hi = np.array([bounds.get(names[i], (-np.inf, np.inf))[1] for i in var_idx], dtype=float)
    x0 = np.clip(v0[var_idx], lo, hi)
    r0 = residual(x0)
    chi0 = float(r0 @ r0)
    with np.errstate(all="ignore"):
        if np.all(np.isinf(lo)) and np.all(np.isinf(hi)):
            out = trust_region(residual, jacobian, x0, f0=r0, max_nfev=max_nfev,
                               ftol=1e-9, xtol=1e-9, gtol=1e-10)
        else:
            out = optimize.least_squares(residual, x0, jac=jacobian, bounds=(lo, hi),
                                         method="trf", x_scale="jac", ftol=1e-9, xtol=1e-9,
                                         gtol=1e-10, max_nfev=max_nfev)
    varied = tuple(names[i] for i in var_idx)
    dof = max(r0.size - var_idx.size, 1)
    chi = float(out.fun @ out.fun)
    if not np.all(np.isfinite(out.fun)) or chi > 1.001 * chi0 + 1e-300:
        return _kept_start(names, v0, varied, r0, int(out.nfev))
    v = v0.copy()
    v[var_idx] = out.x
    return _with_covariance(names, v, var_idx, out.jac, int(out.nfev), bool(out.status > 0),
                            chi, chi / dof, str(out.message), bounds)


def _kept_start(names, v0: np.ndarray, varied: tuple[str, ...], r0: np.ndarray,
                nfev: int) -> Refined:
    """The outcome when the search wandered off (a badly under-modelled start): the
    start's values and χ², no uncertainties, not converged."""
    chi0 = float(r0 @ r0)
    return Refined(values=v0, stderr=np.full(len(names), np.nan), varied=varied,
                   covariance=np.full((len(varied),) * 2, np.nan), evaluations=nfev,
                   success=False, chisqr=chi0, redchi=chi0 / max(r0.size - len(varied), 1),
                   message="refinement made the fit worse; kept the vector-fitting values",
                   uncertainty_reason="no uncertainties: the refinement did not reach an optimum")


def start_beside_fixed(st: Structure, values: np.ndarray, fix: dict[str, float],
                       bounds: dict[str, tuple[float, float]] | None = None) -> np.ndarray:
    """Start values with, for each fixed or bounded pole or zero frequency, the group of
    its kind whose start lies nearest to the held value (or inside the bounds) moved into
    the held slot.

    The user names a group by its number (``pole1_hz``), which the start's
    numbering need not match: holding ``pole1_hz`` at 350 kHz when the start's
    pole1 is at 1 kHz and its pole2 at 350 kHz would throw the 1 kHz pole away
    and leave the refinement to drag pole2 down three decades (it went to the
    right half-plane instead); a bound clips the start the same way.  Swapping
    the two starts keeps both; the result is numbered by frequency afterwards
    (:func:`renumbered`).  Fixed parameters are placed first, then bounded ones;
    a slot once placed is not taken again.
    """
    v = values.copy()
    names = st.names
    held = [(k, (float(x), float(x))) for k, x in fix.items()]
    held += [(k, (float(lo), float(hi))) for k, (lo, hi) in (bounds or {}).items() if k not in fix]
    placed: set[str] = set()

    def distance(x: float, lo: float, hi: float) -> float:
        if lo <= x <= hi:
            return 0.0
        edges = [e for e in (lo, hi) if np.isfinite(e) and e != 0 and x != 0]
        return min((abs(np.log(abs(x / e))) for e in edges), default=np.inf)

    for key, (lo, hi) in held:
        if key not in names or not key.endswith("_hz") or not (np.isfinite(lo) or np.isfinite(hi)):
            continue
        kind, width = (("zero_pair", 2) if key.startswith("zero_pair") else
                       ("pair", 2) if key.startswith("pair") else
                       ("zero", 1) if key.startswith("zero") else ("pole", 1))
        suffix = "_f0_hz" if width == 2 else "_hz"
        i = names.index(key)
        slots = [names.index(nm) for nm in names if nm.startswith(kind) and nm.endswith(suffix)
                 and nm[len(kind)].isdigit() and nm not in placed and nm not in fix]
        j = min(slots + [i], key=lambda k: distance(v[k], lo, hi))
        if j != i and distance(v[j], lo, hi) < distance(v[i], lo, hi):
            v[i: i + width], v[j: j + width] = v[j: j + width].copy(), v[i: i + width].copy()
        placed.add(key)
    return v


def renumbered(st: Structure, ref: Refined) -> tuple[Refined, dict[str, str]]:
    """``ref`` with each group numbered from the lowest frequency up
    (:func:`benchfit.fitting.parameters.renumbering`), and the names that moved
    (old name -> new name: a fixed or bounded parameter keeps its flag under
    its new name)."""
    perm = renumbering(st, ref.values)
    names = st.names
    moved = {names[perm[i]]: names[i] for i in range(len(names)) if perm[i] != i}
    if not moved:
        return ref, {}
    varied = tuple(moved.get(n, n) for n in ref.varied)
    # Covariance rows follow the names: new row k is the old row of varied[k]'s old name.
    back = {new: old for old, new in moved.items()}
    rows = [ref.varied.index(back.get(n, n)) for n in sorted(varied, key=names.index)]
    cov = np.asarray(ref.covariance)[np.ix_(rows, rows)] if len(rows) else ref.covariance
    return replace(ref, values=ref.values[perm], stderr=ref.stderr[perm],
                   varied=tuple(sorted(varied, key=names.index)), covariance=cov,
                   undetermined=tuple(moved.get(n, n) for n in ref.undetermined),
                   at_bound=tuple(moved.get(n, n) for n in ref.at_bound)), moved
