"""When a loop meets its margin targets: the rules, one function each, with no slack.

A target is met or it is not; the same rules judge a nominal prediction
(:func:`margins_meet`, used for ``targets_met`` and the design's warnings) and
every Monte Carlo draw (:func:`draws_pass`, used for the yield), so a draw
equal to the nominal loop passes exactly when the nominal loop does.

Which crossings count (:func:`crossing_counts`): by default every crossing
in the band ("all"): a second gain crossing at a resonance must meet the
phase-margin target as the main crossover does.  The caller may name "main"
(the main crossover's phase margin and the smallest positive gain margin
only, the classical pair) or a band ``(f_lo_hz, f_hi_hz)`` (crossings inside
it count).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

import numpy as np

from benchfit.errors import InputError

#: the crossing choices a caller can name
CROSSING_CHOICES = ("all", "main")
#: numerical resolution of the margins (degrees or dB): a margin computed this close below its
#: target equals it.  The dense analysis polishes crossings to ~1e-13 decade and evaluates in
#: double precision; a network placed by synthesis exactly at a 50° target comes back as
#: 50 - 3e-14°.  This is the arithmetic's own resolution, eight decades under any real
#: shortfall, not a design tolerance: 49.99999 misses 50.
RESOLUTION = 1e-9


def check_crossings(which: Any) -> str | tuple[float, float]:
    """``which`` checked: "all", "main" or a band (lo, hi) in Hz with 0 <= lo < hi."""
    if isinstance(which, str):
        if which in CROSSING_CHOICES:
            return which
        raise InputError(f"crossings {which!r}: expected all, main or a band FMIN:FMAX",
                         source="--count-crossings")
    try:
        lo, hi = (float(v) for v in which)
    except (TypeError, ValueError):
        raise InputError(f"crossings {which!r}: expected all, main or a band FMIN:FMAX",
                         source="--count-crossings") from None
    if not (0 <= lo < hi):
        raise InputError(f"crossing band {lo:g}..{hi:g} Hz: expected 0 <= FMIN < FMAX",
                         source="--count-crossings")
    return (lo, hi)


def meets_phase_margin(pm_deg, target_deg: float):
    """A gain crossing meets the phase-margin target when its phase margin is at least the target.

    The phase margin is signed (180° + ∠T wrapped to (−180°, 180°]): a crossing
    with a negative phase margin fails whatever its size, even when the
    closed loop is stable (its Nyquist curve passes −1 on the wrong side
    there; common practice, no source).  NaN (band does not reach the
    crossover) fails; +inf (no crossing) passes.  The comparison is exact
    to the arithmetic's :data:`RESOLUTION`.
    """
    pm = np.asarray(pm_deg, dtype=float)
    return np.nan_to_num(pm, nan=-np.inf) >= float(target_deg) - RESOLUTION


def meets_gain_margin(gm_db, target_db: float):
    """A phase crossing meets the gain-margin target when |T| there is at least the target away
    from 0 dB.

    A positive gain margin (|T| < 1 at the phase crossing) says how far the
    gain may rise, a negative one (|T| > 1: conditionally stable loops) how
    far it may fall, before −1 is reached; either way the distance is what
    the target bounds.  NaN fails; +inf (no phase crossing) passes.
    """
    gm = np.asarray(gm_db, dtype=float)
    return np.nan_to_num(np.abs(gm), nan=-np.inf) >= float(target_db) - RESOLUTION


def crossing_counts(freq_hz, is_main, which: str | tuple[float, float]):
    """Whether each crossing counts towards the targets under the rule ``which``.

    ``is_main`` marks the crossings the classical pair uses (the main
    crossover, the phase crossing giving the smallest positive gain margin).
    "all" counts every crossing, "main" only those, a band ``(lo, hi)`` the
    crossings with lo <= f <= hi.
    """
    f = np.asarray(freq_hz, dtype=float)
    if which == "all":
        return np.ones(f.shape, dtype=bool)
    if which == "main":
        return np.asarray(is_main, dtype=bool) & np.ones(f.shape, dtype=bool)
    lo, hi = which
    return (f >= lo) & (f <= hi)


def shortfalls(margins, targets, which: str | tuple[float, float] = "all") -> list[dict[str, Any]]:
    """The crossings of one :class:`~benchfit.loop.marginsresult.Margins` that miss a target.

    Returns dicts with ``kind`` ("stability", "gain" or "phase"), ``freq_hz``,
    ``value`` and ``target``; empty when every counted crossing meets its
    target and the closed loop is stable.  The main crossover is judged even
    when it is not among the listed crossings (none in the band: PM inf or nan).
    """
    which = check_crossings(which)
    out: list[dict[str, Any]] = []
    if not margins.closed_loop_stable:
        out.append({"kind": "stability", "freq_hz": math.nan, "value": math.nan,
                    "target": math.nan, "verdict": margins.verdict or "unstable"})
        return out
    pm_t, gm_t = targets.phase_margin_deg, targets.gain_margin_db
    gains = [c for c in margins.crossings if c["kind"] == "gain"]
    phases = [c for c in margins.crossings if c["kind"] == "phase"]
    main_gm = [c for c in phases if c["freq_hz"] == margins.phase_crossover_hz
               and c["value"] == margins.gain_margin_db]
    if not bool(meets_phase_margin(margins.phase_margin_deg, pm_t)) and not gains:
        out.append({"kind": "gain", "freq_hz": margins.crossover_hz,
                    "value": margins.phase_margin_deg, "target": pm_t})
    if gains:
        ok = meets_phase_margin([c["value"] for c in gains], pm_t)
        cnt = crossing_counts([c["freq_hz"] for c in gains], [bool(c.get("main")) for c in gains],
                              which)
        out += [{"kind": "gain", "freq_hz": c["freq_hz"], "value": c["value"], "target": pm_t}
                for c, o, k in zip(gains, ok, cnt, strict=True) if k and not o]
    if phases:
        ok = meets_gain_margin([c["value"] for c in phases], gm_t)
        cnt = crossing_counts([c["freq_hz"] for c in phases],
                              [any(c is m for m in main_gm) for c in phases], which)
        out += [{"kind": "phase", "freq_hz": c["freq_hz"], "value": c["value"], "target": gm_t}
                for c, o, k in zip(phases, ok, cnt, strict=True) if k and not o]
    return out


def margins_meet(margins, targets, which: str | tuple[float, float] = "all") -> bool:
    """True when a nominal prediction meets the targets: stable, and no counted crossing short."""
    return not shortfalls(margins, targets, which)


def draws_pass(stable, pm_main, gm_min, gains: tuple[np.ndarray, np.ndarray, np.ndarray],
               phases: tuple[np.ndarray, np.ndarray, np.ndarray], targets,
               which: str | tuple[float, float] = "all") -> np.ndarray:
    """Which Monte Carlo draws pass: the rule of :func:`margins_meet`, row by row.

    Parameters
    ----------
    stable
        Nyquist verdict "stable" per draw (bool, shape (draws,)).
    pm_main, gm_min
        Main-crossover phase margin and smallest positive gain margin per draw.
    gains, phases
        (row, frequency Hz, value) arrays of every gain crossing's phase
        margin and every phase crossing's gain margin, over all draws.
    targets
        :class:`~benchfit.loop.targets.Targets`.
    which
        Which crossings count (:func:`crossing_counts`).

    Returns
    -------
    ndarray of bool, shape (draws,)
    """
    which = check_crossings(which)
    ok = np.asarray(stable, dtype=bool).copy()
    pm_t, gm_t = targets.phase_margin_deg, targets.gain_margin_db
    if which == "main":     # the classical pair only
        return ok & meets_phase_margin(pm_main, pm_t) & meets_gain_margin(gm_min, gm_t)
    # the main crossover: a band that misses the crossover (NaN) fails under every rule; a
    # finite value is judged through its crossing below (a band rule may leave it out)
    pm_main = np.asarray(pm_main, dtype=float)
    ok &= meets_phase_margin(pm_main, pm_t) | (isinstance(which, tuple) & ~np.isnan(pm_main))
    for (rows, f, v), rule, target in ((gains, meets_phase_margin, pm_t),
                                       (phases, meets_gain_margin, gm_t)):
        rows = np.asarray(rows, dtype=int)
        bad = ~rule(v, target) & crossing_counts(f, np.zeros(np.shape(f), bool), which)
        ok[rows[bad]] = False
    return ok


def describe(which: str | tuple[float, float]) -> str:
    """Plain words for the crossing rule (for reports)."""
    if which == "all":
        return "every crossing"
    if which == "main":
        return "the main crossover and the smallest positive gain margin"
    lo, hi = which
    return f"crossings between {lo:.4g} and {hi:.4g} Hz"


def worst_of(short: Sequence[dict[str, Any]], kind: str) -> dict[str, Any] | None:
    """The shortfall of ``kind`` furthest below its target (for one message per kind)."""
    cand = [s for s in short if s["kind"] == kind]
    if not cand:
        return None
    if kind == "gain":
        return min(cand, key=lambda s: np.nan_to_num(s["value"], nan=-np.inf))
    return min(cand, key=lambda s: np.nan_to_num(abs(s["value"]), nan=-np.inf))
