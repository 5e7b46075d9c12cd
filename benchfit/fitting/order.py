"""Vector-fitting attempts at a given order and delay, and the automatic order choice.

The automatic choice raises the order until the weighted residual reaches
the measurement noise floor (normalised residual ``chi`` ≈ 1, where the σ
come from :mod:`benchfit.fitting.weights`), then looks two orders further in
case the floor was overestimated (a sparse noiseless sweep) and a much better
fit is one or two poles away.  When the residual stops improving before it
reaches the floor, the lowest order on the plateau is taken.  Every
threshold is a ratio, so scaling the data changes nothing.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from benchfit.errors import FitError
from benchfit.fitting.vectfit import VFResult, initial_poles, vector_fit
from benchfit.fitting.weights import PointSigma

#: Normalised residual that counts as "at the noise floor" (common practice, no source:
#: the σ estimate itself is uncertain by several percent).
CHI_OK = 1.15
#: A later order must cut the residual by this factor to replace the candidate.
BIG_GAIN = 0.5
#: Improvement below this fraction over two orders counts as a plateau.
PLATEAU = 0.05
_DB = 20.0 / np.log(10.0)


@dataclass(frozen=True)
class Context:
    """Everything an attempt needs, computed once per fit."""

    s: np.ndarray          # scaled complex frequency jω/scale
    scale: float           # rad/s per scaled unit
    h: np.ndarray          # measured response
    sigma: PointSigma      # per-point σ of ln|H| and phase
    w: np.ndarray          # VF weight of each point's complex error in H
    integrators: int
    direct: bool
    proportional: bool

    def target(self, tau_s: float) -> tuple[np.ndarray, np.ndarray]:
        """Data and weights for VF with integrators and delay taken out."""
        g = self.h * self.s ** self.integrators
        if tau_s:
            g = g * np.exp(self.s * self.scale * tau_s)
        w = self.w / np.abs(self.s) ** self.integrators
        return g, w / np.max(w)


@dataclass(frozen=True)
class Attempt:
    """One VF fit at a given order and delay, with its residual in dB/deg."""

    order: int
    tau_s: float
    vf: VFResult
    rms_db: float
    rms_deg: float
    chi: float

    def summary(self) -> dict:
        return {"order": self.order, "rms_db": self.rms_db, "rms_deg": self.rms_deg,
                "chi": self.chi, "delay_s": self.tau_s, "iterations": self.vf.iterations,
                "converged": self.vf.converged}


#: Iteration cap and pole-move tolerance while scanning orders: an under-modelled
#: order never settles, and the chosen one is polished afterwards.
SCAN_ITER, SCAN_TOL = 8, 1e-3


def attempt(ctx: Context, order: int, tau_s: float = 0.0, poles0=None, max_iter: int = 30,
            tol: float = 1e-8) -> Attempt:
    """Vector-fit at ``order`` poles (plus integrators) with the delay ``tau_s`` removed."""
    g, w = ctx.target(tau_s)
    lo, hi = float(np.abs(ctx.s[0])), float(np.abs(ctx.s[-1]))
    p0 = initial_poles(order, lo, hi) if poles0 is None else poles0
    vf = vector_fit(ctx.s, g, w, p0, direct=ctx.direct, proportional=ctx.proportional,
                    max_iter=max_iter, tol=tol)
    with np.errstate(all="ignore"):
        r = np.log(vf.at(ctx.s) / g)
    if not np.all(np.isfinite(r)):
        return Attempt(order, tau_s, vf, np.inf, np.inf, np.inf)
    rm = r.real
    rp = np.pi - np.mod(np.pi - r.imag, 2.0 * np.pi)
    chi = float(np.sqrt(0.5 * np.mean((rm / ctx.sigma.mag) ** 2 + (rp / ctx.sigma.phase) ** 2)))
    return Attempt(order, tau_s, vf, float(_DB * np.sqrt(np.mean(rm ** 2))),
                   float(np.degrees(np.sqrt(np.mean(rp ** 2)))), chi)


def max_order(n_points: int, cap: int = 40) -> int:
    """Highest order the automatic scan tries for ``n_points`` points."""
    return int(max(0, min(cap, (n_points - 3) // 2)))


def choose_order(ctx: Context, tau_s: float = 0.0, *, n_max: int | None = None,
                 n_min: int = 1) -> tuple[Attempt, list[Attempt]]:
    """Automatic order choice (see module docstring).

    Returns
    -------
    best, scan
        The chosen attempt and every attempt made, in order.
    """
    n_max = max_order(ctx.s.shape[0]) if n_max is None else n_max
    if n_max < n_min:
        raise FitError(f"{ctx.s.shape[0]} points are too few to fit even order {n_min}")
    scan: list[Attempt] = []
    cand: Attempt | None = None
    for n in range(n_min, n_max + 1):
        a = attempt(ctx, n, tau_s, max_iter=SCAN_ITER, tol=SCAN_TOL)
        scan.append(a)
        if cand is None:
            if a.chi <= CHI_OK:
                cand = a
            elif len(scan) >= 4 and min(x.chi for x in scan[-3:]) > (1.0 - PLATEAU) * scan[-4].chi:
                break  # three orders in a row without a real gain: a plateau above the floor
        else:
            if a.chi < BIG_GAIN * cand.chi:
                cand = a
            elif n - cand.order >= 2:
                break
    if cand is None:
        best = min(x.chi for x in scan)
        cand = next(x for x in scan if x.chi <= (1.0 + PLATEAU) * best)
    return cand, scan


def polish(ctx: Context, a: Attempt, max_iter: int = 30) -> Attempt:
    """Continue relocating the poles of ``a`` until they settle (tight tolerance)."""
    b = attempt(ctx, a.order, a.tau_s, poles0=a.vf.poles, max_iter=max_iter)
    return b if b.chi <= 1.5 * a.chi or not np.isfinite(a.chi) else a
