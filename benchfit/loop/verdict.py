"""The Nyquist verdict of sampled loops, with the integrator count weighed, not assumed.

:func:`nyquist_verdict` counts encirclements (:func:`benchfit.loop.crossings.nyquist_count`)
for the integrator count of each row.  When the count is known (a model's
poles at s = 0, or the caller says) that count is used.  Otherwise it comes
from the low-frequency asymptote (:mod:`benchfit.loop.asymptote`); every
integrator count the low end does not rule out is tried, and the verdict
stands only when they all agree (:func:`agreed_verdict`).  A sweep whose low
end cannot decide between counts that give different verdicts gets the
verdict "undecided", which is never counted as stable.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from benchfit.loop.asymptote import AsymptoteRows, fit_asymptote_rows, low_end_phase
from benchfit.loop.crossings import nyquist_count

STABLE, UNSTABLE, UNDECIDED = "stable", "unstable", "undecided"


@dataclass(frozen=True)
class Verdicts:
    """Nyquist verdicts of the rows of a sampled loop (arrays of shape (rows,))."""

    integrators: np.ndarray       # the count used for N, Z (the best one when estimated)
    encirclements: np.ndarray     # N
    rhp: np.ndarray               # Z = P - N for that count
    verdict: np.ndarray           # "stable" / "unstable" / "undecided"
    low_deviation: np.ndarray     # deg: the low end's distance from its asymptote
    high_deviation: np.ndarray    # deg: the high end's distance from its asymptote
    asymptotes: AsymptoteRows | None  # None when the count was given (``.row(i)``)
    inconsistent: np.ndarray | None = None  # bool: some plausible count gives Z < 0

    @property
    def stable(self) -> np.ndarray:
        """True only where the verdict is "stable"."""
        return self.verdict == STABLE


def agreed_verdict(z_by_count: np.ndarray, plausible: np.ndarray) -> np.ndarray:
    """The verdict of each row from the Z of every integrator count it finds plausible.

    Evidence weighed: ``z_by_count[row, n]`` is the number of closed-loop
    right-half-plane poles the Nyquist count gives with n integrators, and
    ``plausible[row, n]`` whether the low end of that row allows n.  A row is
    "stable" when every plausible n gives Z = 0, "unstable" when every
    plausible n gives Z > 0, and "undecided" otherwise (or when no n is
    plausible).  A plausible n with Z < 0 is impossible (a loop cannot have
    fewer than zero closed-loop RHP poles): the data contradict that count's
    assumptions, so such a row is "undecided" whatever the other counts say.
    """
    z = np.asarray(z_by_count)
    pl = np.asarray(plausible, dtype=bool)
    some = pl.any(axis=1)
    negative = np.any((z < 0) & pl, axis=1)
    all_stable = np.all((z == 0) | ~pl, axis=1) & some
    all_unstable = np.all((z > 0) | ~pl, axis=1) & some
    out = np.where(all_stable, STABLE, np.where(all_unstable, UNSTABLE, UNDECIDED))
    return np.where(negative, UNDECIDED, out)


def negative_count(z_by_count: np.ndarray, plausible: np.ndarray) -> np.ndarray:
    """Rows where some plausible integrator count gives a negative closed-loop RHP pole count.

    Evidence weighed: the same ``z_by_count`` and ``plausible`` as
    :func:`agreed_verdict`; Z = P − N < 0 means the measured encirclements
    contradict the declared open-loop RHP poles P and that integrator count
    (noise, a wrong integrator count, or unstable open-loop poles not
    declared).
    """
    return np.any((np.asarray(z_by_count) < 0) & np.asarray(plausible, dtype=bool), axis=1)


def open_at_top(T: np.ndarray) -> np.ndarray:
    """Rows of sampled loops whose last point still has |T| ≥ 1 (the count is left open).

    Evidence weighed: the magnitude at the top of a sweep.  The encirclement count closes
    the curve from the last point towards T(∞) = 0; with |T| ≥ 1 there, the crossover and
    any phase crossing that decide the count lie above the band, so the data support
    neither verdict.  (An LDO loop with its crossover at 25 kHz, swept 100 Hz-1 kHz where
    |T| is still +40 dB, was called unstable with N = −1; python-control's closed-loop poles
    of the true loop are all stable.)  Used for sweeps only: a model is known above its band.
    """
    T = np.atleast_2d(np.asarray(T, dtype=complex))
    return np.abs(T[:, -1]) >= 1.0


def nyquist_verdict(freq_hz, T, unstable: int, integrators=None, *, cand=None,
                    carry_low_end: bool = True, sweep: bool = False) -> Verdicts:
    """Verdicts of the rows of ``T`` (see the module notes).

    Parameters
    ----------
    freq_hz
        Frequencies, Hz, shape (m,).
    T
        Complex loop gains, shape (rows, m) or (m,).
    unstable
        Open-loop right-half-plane poles P.
    integrators
        Known integrator count (int or one per row), or None to estimate it
        from the low end of each row.
    cand
        Intervals where Im T changes sign (computed when None).
    carry_low_end
        Follow a fitted low-end model down to ω → 0+ for the start angle
        (data); False snaps the first point's own angle (a model evaluated
        far below its corners).
    sweep
        The rows are measured sweeps: a row that ends with |T| ≥ 1 is "undecided"
        (:func:`open_at_top`).
    """
    f = np.asarray(freq_hz, dtype=float).reshape(-1)
    T = np.atleast_2d(np.asarray(T, dtype=complex))
    rows = T.shape[0]
    if cand is None:
        im = T.imag
        cand = np.nonzero((im[:, :-1] > 0) != (im[:, 1:] > 0))
    asym: AsymptoteRows | None = None
    if integrators is not None:
        n = np.broadcast_to(np.asarray(integrators, dtype=int), (rows,)).copy()
        counts = np.unique(n)
        plausible = np.zeros((rows, int(counts.max()) + 1), dtype=bool)
        plausible[np.arange(rows), n] = True
    else:
        asym = fit_asymptote_rows(f, T)
        n = asym.n.astype(int)
        plausible = asym.plausible
        counts = np.flatnonzero(plausible.any(axis=0))
    z_by = np.zeros(plausible.shape, dtype=int)
    N = np.zeros(rows, dtype=int)
    Z = np.zeros(rows, dtype=int)
    dev0 = np.zeros(rows)
    devinf = np.zeros(rows)
    for k in counts:
        sel = np.flatnonzero(plausible[:, k])
        whole = sel.size == rows            # every row: no copies
        Tk = T if whole else T[sel]
        low = low_end_phase(f, Tk, np.full(sel.size, k)) if carry_low_end else None
        cand_k = cand if whole else _rows_of(cand, sel)
        nk, zk, d0, dinf = nyquist_count(Tk, np.full(sel.size, k), unstable, cand_k, low)
        z_by[sel, k] = zk
        mine = n[sel] == k
        N[sel[mine]], Z[sel[mine]] = nk[mine], zk[mine]
        dev0[sel[mine]], devinf[sel[mine]] = d0[mine], dinf[mine]
    verdict = agreed_verdict(z_by, plausible)
    if sweep:
        verdict = np.where(open_at_top(T), UNDECIDED, verdict)
    return Verdicts(integrators=n, encirclements=N, rhp=Z,
                    verdict=verdict, low_deviation=dev0,
                    high_deviation=devinf, asymptotes=asym,
                    inconsistent=negative_count(z_by, plausible))


def _rows_of(cand: tuple[np.ndarray, np.ndarray], sel: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The candidate intervals of rows ``sel``, renumbered 0..len(sel)-1."""
    r, c = cand
    pos = np.full(int(max(r.max(initial=-1), sel.max(initial=-1))) + 1, -1)
    pos[sel] = np.arange(sel.size)
    keep = pos[r] >= 0
    return pos[r[keep]], c[keep]
