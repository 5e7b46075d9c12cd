"""One fit's fixed inputs: the band's data, its noise, the options, and refiners over them.

:func:`prepare` checks the data, estimates the per-point σ
(:mod:`benchfit.fitting.weights`) and builds the vector-fitting
:class:`~benchfit.fitting.order.Context`; :class:`Problem` carries these
through the stages of :func:`benchfit.fitting.api.fit` and hands out the
refinements the stages compare models with (:meth:`Problem.refiner`).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from benchfit.data.response import FrequencyResponse
from benchfit.errors import FitError, InputError
from benchfit.fitting.order import CHI_OK, Attempt, Context
from benchfit.fitting.ordering import rank_bounds
from benchfit.fitting.parameters import TWO_PI, Structure
from benchfit.fitting.refine import Refined, objective, refine
from benchfit.fitting.weights import PointSigma, point_sigma, scatter_sigma, vf_weight

#: Orders and delays are scanned, and hypotheses compared, on at most this many points
#: (see Context.subsample).
SCAN_POINTS = 250

Refiner = Callable[..., Refined]


def _slope(f: np.ndarray, mag: np.ndarray, part: slice) -> float:
    """Median log-log slope of |H| (decades of |H| per decade of f) over ``part``."""
    g = np.gradient(np.log(mag), np.log(f))[part]
    return float(np.median(g)) if g.size else 0.0


def detect_integrators(f: np.ndarray, h: np.ndarray) -> int:
    """Integrators seen at the bottom of the band: slope −m and phase −90°·m (common practice)."""
    n = f.shape[0]
    part = slice(0, max(3, n // 20))
    m = int(round(-_slope(f, np.abs(h), part)))
    if m <= 0:
        return 0
    ph = np.degrees(np.angle(h[part]))
    # phase of gain/s^m: −90·m (or +180 offset for an inverting gain)
    err = np.abs(((ph + 90.0 * m) + 90.0) % 180.0 - 90.0)
    return min(m, 3) if float(np.median(err)) < 20.0 else 0


def hf_terms(f: np.ndarray, h: np.ndarray, integrators: int) -> tuple[bool, bool]:
    """Direct/proportional terms from the magnitude slope at the top of the band."""
    n = f.shape[0]
    s = _slope(f, np.abs(h), slice(n - max(3, n // 10), n)) + integrators
    return s > -0.5, s > 0.5


def other_direct_worth_trying(att: Attempt) -> bool:
    """True when a fixed-order fit also tries vector fitting with the other choice of
    direct term than :func:`hf_terms` made (the lower residual of the two goes on).

    Evidence weighed: the attempt with the slope rule's choice stays above the
    noise floor (normalised residual over
    :data:`~benchfit.fitting.order.CHI_OK`) and its pole relocation did not
    settle (``vf.converged`` False: the model class keeps the poles moving).
    The slope rule reads the log-log slope of |H| over the top tenth of the
    band, which says little on a narrow band: on scikit-rf's ``ring slot.s2p``
    S21 (75–110 GHz) it is −3 while |S21| only goes from 0.52 to 0.51, the
    rule leaves the direct term out, and the relocation at order 8 mirrors
    poles at every step for all its 30 relocations (residual 1.96× the
    floor); with the direct term it settles after 28 at 0.82×.  An attempt
    that settled is a fixed point of the relocation and is left as it is: on
    ``ro,3.s1p`` S11 (order 6, settled at 1.49×) the other choice gave 1.51×
    and did not settle.
    """
    return bool(att.chi > CHI_OK and not att.vf.converged)


def rebuild_worth_trying(att: Attempt) -> bool:
    """True when a fixed-order fit builds its start up from two orders below (the warm
    starts of the order scan, :func:`benchfit.fitting.order.choose_order`) besides the
    fresh start ``att``.

    Evidence weighed: the fresh attempt's residual over the noise floor
    (:data:`~benchfit.fitting.order.CHI_OK`) and whether its relocation settled.
    A fresh start of log-spaced poles may miss a weak feature, which the warm
    starts place where the residual peaks; a relocation that settled above
    the floor is a fixed point the warm starts reached too on every case of
    ``benchmarks/fit_vs_reference.py`` (2026-12-03: ``ro,3.s1p`` 1.491× the
    floor fresh, 1.492× built up; ``wr2p2,line.s2p`` 5.46× both), at 3–6× the
    fresh attempt's cost; only the unsettled ``ring slot.s2p`` S21 start
    gained (1.96× to 1.73×, without the direct term).
    """
    return bool(att.chi > CHI_OK and not att.vf.converged)


@dataclass(frozen=True, eq=False)
class Problem:
    """The data and options of one fit (see :func:`prepare`)."""

    resp: FrequencyResponse
    sigma: PointSigma
    ctx: Context
    order: int | str
    delay: float | str
    fixed: dict[str, float]
    bounds: dict[str, tuple[float, float]]
    weighting: str
    settings: dict[str, Any]
    sig_abs: np.ndarray | None = None
    idx: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=int))
    stable: bool = False

    @property
    def f(self) -> np.ndarray:
        return self.resp.freq_hz

    @property
    def h(self) -> np.ndarray:
        return self.resp.response

    @property
    def n_points(self) -> int:
        return int(self.resp.freq_hz.shape[0])

    @property
    def may_add_delay(self) -> bool:
        """Pruning may offer a delay in place of lagging zeros (``delay="auto"`` only)."""
        return self.delay == "auto" and "delay_s" not in self.fixed

    def held(self, *prefixes: str) -> bool:
        """True when the user fixes or bounds a parameter whose name starts with a prefix."""
        return any(key.startswith(prefixes) for key in (*self.fixed, *self.bounds))

    def bounds_for(self, st: Structure, causal: bool = False, values: np.ndarray | None = None
                   ) -> dict[str, tuple[float, float]]:
        """The user's bounds for the parameters of ``st``; with ``causal`` a delay held
        at or above zero; with :attr:`stable` every pole frequency and pair Q held at
        or above zero (left half-plane); with the start ``values``, the bounds that
        keep a held frequency at the rank its name gives
        (:func:`benchfit.fitting.ordering.rank_bounds`)."""
        out = dict(self.bounds) if values is None else rank_bounds(st, values, self.bounds,
                                                                   self.fixed)
        if causal and st.delay:
            lo, hi = out.get("delay_s", (-np.inf, np.inf))
            out["delay_s"] = (max(lo, 0.0), hi)
        if not self.stable:
            return out
        for nm in st.names:
            if nm.startswith("pole") or (nm.startswith("pair") and nm.endswith(("_hz", "_q"))):
                lo, hi = out.get(nm, (-np.inf, np.inf))
                out[nm] = (max(lo, 0.0), hi)
        return out

    def evaluate(self, st: Structure, values: np.ndarray, idx: np.ndarray | None = None
                 ) -> Refined:
        """χ² of ``values`` as they are (nothing refined) on the points ``idx``."""
        fix = dict(zip(st.names, np.asarray(values, dtype=float), strict=True))
        sel = slice(None) if idx is None else idx
        s = 1j * TWO_PI * self.f[sel]
        return refine(st, values, s, self.h[sel], self.sigma.mag[sel], self.sigma.phase[sel],
                      fix=fix, weighting=self.weighting,
                      sig_abs=None if self.sig_abs is None else self.sig_abs[sel])

    def linearised(self, idx: np.ndarray | None = None) -> Callable[[Structure, np.ndarray], float]:
        """``(structure, values) -> χ²``: the χ² on the points ``idx`` (all when None)
        after one Gauss–Newton step from ``values``, the varied parameters moved to
        the least-squares optimum of the residual linearised there (bounds not
        applied); one evaluation of the residual and its Jacobian, nothing refined."""
        s = 1j * TWO_PI * self.f
        sel = slice(None) if idx is None else idx
        sig_abs = None if self.sig_abs is None else self.sig_abs[sel]

        def run(st: Structure, values: np.ndarray) -> float:
            ob = objective(st, values, s[sel], self.h[sel], self.sigma.mag[sel],
                           self.sigma.phase[sel], fix=self.fixed, weighting=self.weighting,
                           sig_abs=sig_abs)
            x = ob.v0[ob.var_idx]
            r = ob.residual(x)
            j = ob.jacobian(x)
            if not (np.all(np.isfinite(r)) and np.all(np.isfinite(j))):
                return float("nan")
            # column scaling keeps the least-squares solve accurate (Hz beside Q)
            norm = np.linalg.norm(j, axis=0)
            norm[norm == 0] = 1.0
            step = np.linalg.lstsq(j / norm, -r, rcond=None)[0]
            rest = r + (j / norm) @ step
            return float(rest @ rest)

        return run

    def refiner(self, idx: np.ndarray | None = None, causal: bool = False) -> Refiner:
        """``(structure, values, max_nfev=200) -> Refined`` on the points ``idx`` (all when
        None), by :func:`benchfit.fitting.refine.refine`.  ``causal``: the delay may
        not go below zero."""
        s = 1j * TWO_PI * self.f
        h, sig = self.h, self.sigma
        sel = slice(None) if idx is None else idx
        sig_abs = None if self.sig_abs is None else self.sig_abs[sel]

        def run(st: Structure, values: np.ndarray, max_nfev: int = 200) -> Refined:
            return refine(st, values, s[sel], h[sel], sig.mag[sel], sig.phase[sel],
                          fix=self.fixed, bounds=self.bounds_for(st, causal, values),
                          weighting=self.weighting,
                          sig_abs=sig_abs, max_nfev=max_nfev)

        return run


def passive(resp: FrequencyResponse) -> bool:
    """True when the data are of a passive device, whose model must be stable.

    Evidence weighed: the quantity (an impedance is passive, common practice),
    or a Touchstone scattering parameter whose magnitude never exceeds 1 (a
    passive network does not amplify; a |S| > 1 anywhere may be an amplifier).
    """
    if resp.quantity == "impedance":
        return True
    dialect = (resp.meta or {}).get("dialect") or {}
    param = str(dialect.get("parameter", ""))
    return bool(str(dialect.get("format", "")).startswith("touchstone") and param.startswith("S")
                and np.max(np.abs(resp.response)) <= 1.0)


def prepare(resp: FrequencyResponse, order: int | str, delay: float | str, band, fix,
            weighting: str, integrators: int | str, bounds, stable: bool | None = None
            ) -> Problem:
    """Check the band's data and build the :class:`Problem` (σ, VF context, options).

    ``stable``: force left-half-plane poles; None (default) forces them for
    :func:`passive` data only.

    Raises
    ------
    FitError
        A response with exact zeros, a constant one, no usable weight, or too
        few points for the order asked.
    """
    settings: dict[str, Any] = {"order": order, "delay": delay, "band": list(band) if band else None,
                                "fix": dict(fix or {}), "weighting": weighting,
                                "integrators": integrators,
                                "bounds": {k: list(v) for k, v in (bounds or {}).items()},
                                "stable": stable}
    if band is not None:
        resp = resp.band(*band)
    f, h = resp.freq_hz, resp.response
    n_pts = f.shape[0]
    mag = np.abs(h)
    if np.any(mag == 0):
        raise FitError("the response is exactly zero at some points; a log fit needs |H| > 0")
    lnm, ph = np.log(mag), np.unwrap(np.angle(h))
    if np.ptp(lnm) < 1e-9 and np.ptp(ph) < 1e-9:
        raise FitError("the response is constant over the band: there is nothing for poles and "
                       "zeros to fit (a pure gain)")
    sigma = point_sigma(h, resp.stddev, resp.coherence, resp.weight, freq_hz=f)
    m = detect_integrators(f, h) if integrators == "auto" else int(integrators)
    scale = TWO_PI * float(np.sqrt(f[0] * f[-1]))
    direct, prop = hf_terms(f, h, m)
    w = vf_weight(h, sigma, weighting, resp.stddev)
    if not np.any(w > 0):
        raise FitError("no point has a usable weight")
    ctx = Context(s=1j * TWO_PI * f / scale, scale=scale, h=h, sigma=sigma, w=w, integrators=m,
                  direct=direct, proportional=prop)
    if order != "auto" and n_pts < int(order) + 3:
        raise FitError(f"order {order} needs at least {int(order) + 3} points in the band; "
                       f"it holds {n_pts}")
    fixed = dict(fix or {})
    if not isinstance(delay, str) and delay > 0:
        fixed.setdefault("delay_s", float(delay))
    sig_abs = None
    if weighting == "absolute":
        # The stddev column is the σ of the complex response: a circular error puts
        # σ/√2 into each of the real and imaginary parts the residual is made of.
        sig_abs = resp.stddev / np.sqrt(2.0) if resp.stddev is not None else np.full(
            n_pts, float(np.median(np.concatenate([scatter_sigma(h.real), scatter_sigma(h.imag)]))))
    force = passive(resp) if stable is None else bool(stable)
    if force:
        _check_stable_options(fixed, dict(bounds or {}))
    return Problem(resp=resp, sigma=sigma, ctx=ctx, order=order, delay=delay, fixed=fixed,
                   bounds=dict(bounds or {}), weighting=weighting, settings=settings,
                   sig_abs=sig_abs, idx=ctx.subsample_index(SCAN_POINTS), stable=force)


def _check_stable_options(fixed: dict[str, float], bounds: dict[str, tuple[float, float]]) -> None:
    """A right-half-plane pole the user fixes or bounds cannot be honoured with a stable model."""
    for name, value in fixed.items():
        if name.startswith(("pole", "pair")) and not name.endswith("f0_hz") and value < 0:
            raise InputError(f"{name}={value:g} is a right-half-plane pole, but the model is held "
                             "stable (--stable, the default for passive data; --no-stable "
                             "allows it)", source="--fix")
    for name, (_, hi) in bounds.items():
        if name.startswith(("pole", "pair")) and not name.endswith("f0_hz") and hi < 0:
            raise InputError(f"{name} bounded below zero is a right-half-plane pole, but the "
                             "model is held stable (--stable, the default for passive data; "
                             "--no-stable allows it)", source="--bound")
