"""Does a raw loop sweep come from an open-loop-unstable loop?  The check margins makes.

The Nyquist count needs P, the number of open-loop right-half-plane poles.
A model counts its own; a raw sweep does not say, and taking P = 0 for an
open-loop-unstable loop turns an unstable closed loop into a "stable" one.
When the caller did not give P, :func:`check_open_loop` weighs the sweep:

1. a cheap screen (:func:`excess_phase_rise`): a stable minimum-phase loop's
   phase follows from its magnitude (Bode's gain-phase relation); a
   right-half-plane pole has the magnitude of its mirror image but *adds*
   up to +180° of phase over it, whereas delays and right-half-plane zeros
   only take phase away.  A measured phase that rises above the
   minimum-phase phase by more than :data:`RISE_SUSPECT_DEG` is suspect;
2. only a suspect sweep is fitted (:func:`benchfit.fitting.fit`, integrators
   found by the fit); when the fit keeps right-half-plane poles that the data
   demand (the fit's own information-criterion test,
   :func:`benchfit.fitting.selection.unstable_demanded`), the verdict becomes
   "undecided" and the user is told to give ``--unstable-poles N``
   (:func:`rhp_verdict`).  The fitted count is not used silently: the user
   states P, the fit only says P = 0 is not believable.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np
from scipy.special import spence

from benchfit.loop.marginsresult import Margins

#: Rise (deg) of the measured phase above the minimum-phase phase that makes a sweep suspect
#: of right-half-plane poles (our own threshold, no source): a pole inside the band adds 90° at
#: its own frequency and approaches 180°; the screen's own error on sampled minimum-phase
#: loops (finite band, noise, resonances between points) stays well below this.  A suspect
#: sweep is only fitted; the fit decides.
RISE_SUSPECT_DEG = 60.0
#: Most frequencies the minimum-phase phase is evaluated at (the screen stays O(300 m)).
MAX_EVAL = 300


def _bode_kernel_integral(v: np.ndarray) -> np.ndarray:
    """F(v) = ∫_0^v ln coth(|t|/2) dt (odd; F(±∞) = ±π²/4).

    For v >= 0, π²/4 − F(v) = 2 Σ_{k odd} e^{−kv}/k² = 2 (Li2(x) − Li2(x²)/4), x = e^{−v}
    (series of ln coth; scipy's ``spence(z)`` is Li2(1 − z)).
    """
    a = np.abs(v)
    x = np.exp(-a)
    tail = 2.0 * (spence(1.0 - x) - spence(1.0 - x * x) / 4.0)
    return np.sign(v) * (np.pi ** 2 / 4.0 - tail)


def minimum_phase_deg(freq_hz, T, at: np.ndarray | None = None) -> np.ndarray:
    """The phase (deg) a stable minimum-phase loop with the magnitude |T| would have.

    Bode's gain-phase relation φ(u0) = (1/π) ∫ (d ln|T| / du) ln coth(|u − u0|/2) du,
    u = ln ω, with the slope piecewise constant between points and held at its end
    values beyond the band (Bode, *Network Analysis and Feedback Amplifier Design*,
    1945, ch. 14).  ``at`` indexes the points to evaluate at (all when None).
    """
    f = np.asarray(freq_hz, dtype=float)
    u = np.log(f)
    A = np.log(np.abs(np.asarray(T, dtype=complex)))
    slope = np.diff(A) / np.diff(u)
    idx = np.arange(f.size) if at is None else np.asarray(at)
    u0 = u[idx][:, None]
    F = _bode_kernel_integral(u[None, :] - u0)        # at every point, once
    inside = (slope[None, :] * np.diff(F, axis=1)).sum(axis=1)
    q = np.pi ** 2 / 4.0
    below = slope[0] * (F[:, 0] + q)
    above = slope[-1] * (q - F[:, -1])
    return np.degrees((inside + below + above) / np.pi)


def excess_phase_rise(freq_hz, T) -> float:
    """Largest rise (deg) of the measured phase over the minimum-phase phase, low to high f.

    Evidence weighed: the unwrapped measured phase minus :func:`minimum_phase_deg`.
    That excess is constant for a stable minimum-phase loop (a sign inversion or a
    whole turn only shifts it), falls with frequency for delays and right-half-plane
    zeros, and rises by up to 180° per right-half-plane pole.  Returns
    max over i < j of excess[j] − excess[i].
    """
    f = np.asarray(freq_hz, dtype=float)
    T = np.asarray(T, dtype=complex)
    at = np.unique(np.linspace(0, f.size - 1, min(MAX_EVAL, f.size)).round().astype(int))
    ph = np.degrees(np.unwrap(np.angle(T)))[at]
    e = ph - minimum_phase_deg(f, T, at)
    return float(np.max(e - np.minimum.accumulate(e)))


@dataclass(frozen=True)
class OpenLoopEvidence:
    """What the check found: the screen's rise and, when fitted, the fit's RHP poles."""

    rise_deg: float
    suspect: bool
    fitted: bool = False
    rhp_poles: int = 0
    demanded: bool = False
    bic_margin: float = 0.0
    fit_note: str = ""

    def to_dict(self) -> dict:
        return {"rise_deg": self.rise_deg, "suspect": self.suspect, "fitted": self.fitted,
                "rhp_poles": self.rhp_poles, "demanded": self.demanded,
                "bic_margin": self.bic_margin, "fit_note": self.fit_note}


def rhp_verdict(evidence: OpenLoopEvidence) -> int | None:
    """The number of RHP poles that makes a P = 0 verdict untenable, or None.

    Evidence weighed: the fit's right-half-plane pole count and whether its
    information criterion demands them over the best stable fit
    (``rhp_demanded``).  Returns that count when the fit holds RHP poles the
    data demand, else None (P = 0 stands: no screen suspicion, no fit, or
    RHP poles the data do not clearly demand).
    """
    if evidence.fitted and evidence.demanded and evidence.rhp_poles > 0:
        return evidence.rhp_poles
    return None


def gather_evidence(resp) -> OpenLoopEvidence:
    """Screen the sweep and, only when it is suspect, fit it (see the module notes)."""
    rise = excess_phase_rise(resp.freq_hz, resp.response)
    if rise <= RISE_SUSPECT_DEG:
        return OpenLoopEvidence(rise_deg=rise, suspect=False)
    from benchfit.errors import BenchfitError
    from benchfit.fitting import fit

    try:
        with np.errstate(all="ignore"):
            fr = fit(resp, integrators="auto")
    except BenchfitError as e:
        return OpenLoopEvidence(rise_deg=rise, suspect=True, fit_note=f"the fit failed ({e})")
    st = fr.stats
    return OpenLoopEvidence(rise_deg=rise, suspect=True, fitted=True,
                            rhp_poles=int(st.get("rhp_poles", 0) or 0),
                            demanded=bool(st.get("rhp_demanded", False)),
                            bic_margin=float(st.get("rhp_bic_margin", 0.0) or 0.0))


def check_open_loop(resp, margins: Margins) -> Margins:
    """``margins`` (computed with P = 0) made "undecided" when the sweep looks open-loop unstable.

    Applies :func:`rhp_verdict` to :func:`gather_evidence`; a sweep that passes the
    screen is returned unchanged (no fit is run).  A suspect sweep whose fit does not
    demand RHP poles keeps its verdict.
    """
    ev = gather_evidence(resp)
    n = rhp_verdict(ev)
    if n is None:
        return margins
    msg = (f"undecided: the sweep looks open-loop unstable ({n} RHP pole(s) in its fitted model, "
           f"which the data demand: a stable fit's BIC is {ev.bic_margin:.0f} higher); "
           f"give --unstable-poles {n} (or the true count) for a verdict")
    return replace(margins, verdict="undecided", closed_loop_stable=False,
                   warnings=(msg,) + margins.warnings)
