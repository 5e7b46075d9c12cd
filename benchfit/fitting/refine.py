"""Nonlinear least-squares refinement of the physical parameters.

Vector fitting's fixed point is not the least-squares optimum (Lefteriu &
Antoulas, "On the convergence of the vector-fitting algorithm", IEEE Trans.
MTT 61(4), 2013), so the VF model is only a starting point.  Here the
physical parameters are refined on the complex log response: the residual of
a point is ``ln(H_model/H_data)``, whose real part is the magnitude error in
nepers and whose imaginary part is the phase of the ratio (wrapped, never a
difference of unwrapped phases), each divided by its σ.  The Jacobian is
analytic (:func:`benchfit.fitting.parameters.log_jacobian`, evaluated by
:mod:`benchfit.fitting.factors`).

The solver is trust-region reflective least squares with Jacobian scaling,
the algorithm of lmfit's ``least_squares`` method (scipy's TRF), run through
:func:`benchfit.fitting.lsq.least_squares` without lmfit's parameter objects
(their construction and per-call bookkeeping cost more than a whole
refinement of a 201-point sweep).  ``tests/test_fit_solvers.py`` checks that
it reaches lmfit's optimum (``lmfit.Minimizer.least_squares``, the outside
reference) on the same residual, bounded and unbounded.

With ``weighting="absolute"`` the residual is the plain complex error
``(H_model − H_data)/σ_abs`` instead.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, replace

import numpy as np

from benchfit.errors import InputError
from benchfit.fitting.factors import log_jacobian_at, log_response
from benchfit.fitting.lsq import least_squares
from benchfit.fitting.order import NEGLIGIBLE
from benchfit.fitting.parameters import Structure, log_jacobian, renumbering, response
from benchfit.fitting.uncertainty import SIGMA_REL_MAX, beyond_linear, held_covariance, on_bound

#: Residual given to a point where a trial model does not evaluate.
_PENALTY = 1e6
#: The solver's stopping tests (scipy's names): chosen when the refinement went through
#: lmfit, kept so the optimum is the one lmfit reaches.
FTOL, XTOL, GTOL = 1e-9, 1e-9, 1e-10
#: A step that lowers χ² by less than this fraction of the noise scale (the reduced χ²,
#: floored where the fit is exact) ends the refinement (see :func:`noise_settled`).
NOISE_FTOL = 1e-3


def noise_settled(dof: int) -> Callable[[float], float]:
    """The stop test of a refinement in units of the noise: ``settle(cost)`` for
    :func:`benchfit.fitting.lsq.least_squares`, the decrease of the cost ½χ² below
    which a step that went well ends the search.

    Evidence weighed: the step's χ² decrease against :data:`NOISE_FTOL` times
    the noise scale, the reduced χ² ``χ²/dof`` at the step's start, floored at
    NEGLIGIBLE² (:data:`benchfit.fitting.order.NEGLIGIBLE`: a fit whose
    residual is under a hundredth of the noise is exact, as :func:`bic` of
    selection.py counts it).  Every decision made on a refinement compares χ²
    differences in units of the reduced χ² against ln N per parameter (6 at
    N = 400): a step worth 1e-3 of it changes none of them, nor any standard
    error; in the quadratic regime the step that reaches the optimum from a
    point δx away lowers χ² by δxᵀJᵀJδx, so a decrease of 1e-3 reduced χ² is
    0.03 σ of the parameters along that step.  (A step short of the optimum,
    along a curved valley the trust region follows, may leave more; this is
    scipy's ``ftol`` test, a step that went well and lowered the cost by
    little, with the noise in place of the cost as the scale.)  scipy's
    relative ``ftol`` of 1e-9 alone let the refinement creep: scikit-rf's
    ``line.s2p`` at order 8 went on for 130 evaluations to lower χ² by
    3e-4 (its reduced χ² is 0.024), ``ro,3.s1p`` for 70 to lower it by 0.06
    (reduced χ² 2.2).  A start whose whole χ² is below the threshold is
    settled where it is (noiseless data fitted to rounding level: the
    noiseless 8-pole benchmark plant starts at a residual of 5e-7 of its
    σ, itself floored at 1e-10, and took 10 to 24 evaluations of 1601 points
    chasing rounding).
    """
    dof = max(int(dof), 1)
    floor = NEGLIGIBLE ** 2

    def settle(cost: float) -> float:
        return 0.5 * NOISE_FTOL * max(2.0 * cost / dof, floor)

    return settle


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


@dataclass(frozen=True)
class Objective:
    """The weighted residual of one refinement over its varied parameters.

    ``residual(x)`` and ``jacobian(x)`` take the varied values ``x`` (in the
    order of ``var_idx``); ``full(x)`` is the whole parameter vector.
    """

    names: tuple[str, ...]
    v0: np.ndarray                   # start, every parameter (fixed ones at their values)
    var_idx: np.ndarray              # indices of the varied parameters
    lower: np.ndarray                # bounds of the varied parameters (±inf: none)
    upper: np.ndarray
    residual: Callable[[np.ndarray], np.ndarray]
    jacobian: Callable[[np.ndarray], np.ndarray]

    def full(self, x: np.ndarray) -> np.ndarray:
        v = self.v0.copy()
        v[self.var_idx] = x
        return v


def objective(st: Structure, values0: np.ndarray, s: np.ndarray, h: np.ndarray,
              sig_mag: np.ndarray, sig_phase: np.ndarray, *,
              fix: dict[str, float] | None = None,
              bounds: dict[str, tuple[float, float]] | None = None,
              weighting: str = "relative", sig_abs: np.ndarray | None = None) -> Objective:
    """The :class:`Objective` :func:`refine` minimises (parameters as there).

    Raises
    ------
    InputError
        A fixed or bounded name the model does not have (naming ``--fix`` or ``--bound``).
    """
    names = st.names
    fix = dict(fix or {})
    bounds = dict(bounds or {})
    for key in list(fix) + list(bounds):
        if key not in names:
            raise InputError(f"no parameter {key!r} in this model; it has {', '.join(names)}",
                             source="--fix" if key in fix else "--bound")
    v0 = start_beside_fixed(st, np.array(values0, dtype=float), fix, bounds)
    for i, name in enumerate(names):
        if name in fix:
            v0[i] = float(fix[name])
    var_idx = np.array([i for i, n in enumerate(names) if n not in fix], dtype=int)
    lo = np.array([bounds.get(names[i], (-np.inf, np.inf))[0] for i in var_idx], dtype=float)
    hi = np.array([bounds.get(names[i], (-np.inf, np.inf))[1] for i in var_idx], dtype=float)
    v0[var_idx] = np.clip(v0[var_idx], lo, hi)
    n_s = s.shape[0]
    log_h = np.log(h.astype(complex))
    w_m, w_p = 1.0 / sig_mag, 1.0 / sig_phase
    absolute = weighting == "absolute"
    w_a = None if not absolute else 1.0 / (sig_abs if sig_abs is not None else np.ones(n_s))

    def current(x: np.ndarray) -> np.ndarray:
        v = v0.copy()
        v[var_idx] = x
        return v

    last: list = [None]  # factor terms of the last residual, for the Jacobian at that point

    def residual(x: np.ndarray) -> np.ndarray:
        v = current(x)
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

    def jacobian(x: np.ndarray) -> np.ndarray:
        v = current(x)
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

    return Objective(names, v0, var_idx, lo, hi, residual, jacobian)


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

    Notes
    -----
    Trust-region reflective least squares (lmfit's ``least_squares`` method,
    scipy's TRF) with the analytic Jacobian and Jacobian-based scaling of the
    parameters (Hz and Q differ by six decades), tolerances :data:`FTOL`,
    :data:`XTOL`, :data:`GTOL` and the stop in units of the noise
    (:func:`noise_settled`); bounds as
    :func:`benchfit.fitting.lsq.least_squares` handles them.  Not MINPACK's
    lmder: it crashed the process on some trial steps here.  The covariance is
    :func:`benchfit.fitting.uncertainty.covariance`'s.
    """
    ob = objective(st, values0, s, h, sig_mag, sig_phase, fix=fix, bounds=bounds,
                   weighting=weighting, sig_abs=sig_abs)
    names, v0, var_idx = ob.names, ob.v0, ob.var_idx
    x0 = v0[var_idx]
    r0 = ob.residual(x0)
    chi0 = float(r0 @ r0)
    if var_idx.size == 0:
        return Refined(values=v0, stderr=np.full(len(names), np.nan), varied=(),
                       covariance=np.zeros((0, 0)), evaluations=1, success=True,
                       chisqr=chi0, redchi=chi0 / max(r0.size, 1), message="all parameters fixed")
    with np.errstate(all="ignore"):
        out = least_squares(ob.residual, ob.jacobian, x0, ob.lower, ob.upper, f0=r0,
                            max_nfev=max_nfev, ftol=FTOL, xtol=XTOL, gtol=GTOL,
                            settle=noise_settled(r0.size - var_idx.size) if NOISE_FTOL else None)
    varied = tuple(names[i] for i in var_idx)
    dof = max(r0.size - var_idx.size, 1)
    chi = float(out.fun @ out.fun)
    if not np.all(np.isfinite(out.fun)) or chi > 1.001 * chi0 + 1e-300:
        # The search wandered off (a badly under-modelled start): keep the start.
        return _kept_start(names, v0, varied, r0, int(out.nfev))
    bounds = dict(bounds or {})
    return _with_covariance(names, ob.full(out.x), var_idx, out.jac, int(out.nfev),
                            bool(out.status > 0), chi, chi / dof, str(out.message), bounds)


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
    # A σ far beyond its value is no σ (uncertainty.beyond_linear): set aside like an
    # ill-conditioned direction, the worst first, and the rest's σ held at its value.
    loose = np.zeros(len(varied), dtype=bool)
    while True:
        wild = beyond_linear(values[var_idx], cov.stderr) & ~loose & ~held
        if not wild.any():
            break
        ratio = np.where(wild, cov.stderr / np.maximum(np.abs(values[var_idx]), 1e-300), -1.0)
        loose[int(np.argmax(ratio))] = True
        cov = held_covariance(jac, redchi, held | loose)
    undetermined = sorted({*cov.undetermined, *np.flatnonzero(loose).tolist()})
    reason = cov.reason
    if loose.any():
        # no names here: the note lists the undetermined ones under their final names (the
        # renumbering renames the tuple, not this text)
        big = (f"{int(loose.sum())} with σ over {SIGMA_REL_MAX:g}× the value, far beyond what "
               "the linearised covariance describes (the data bound them only loosely)")
        reason = f"{reason}; {big}" if reason else big
    stderr = np.full(len(names), np.nan)
    stderr[var_idx] = cov.stderr
    return Refined(values=values, stderr=stderr, varied=varied, covariance=cov.matrix,
                   evaluations=nfev, success=success, chisqr=chisqr, redchi=redchi,
                   message=message, undetermined=tuple(varied[k] for k in undetermined),
                   uncertainty_reason=reason,
                   at_bound=tuple(varied[k] for k in np.flatnonzero(held)))


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
