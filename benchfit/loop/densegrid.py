"""Evaluating a loop function densely: a log grid refined where the loop changes fast.

Used by :func:`benchfit.loop.margins.margins_from_model`; :func:`model_band`
picks a band that holds every singularity of a model and its crossover.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence

import numpy as np

from benchfit.errors import InputError
from benchfit.loop.crossings import to_db

LoopFn = Callable[[np.ndarray], np.ndarray]

# refinement limits: phase/gain steps between neighbours
#: below this loop gain (dB) the phase is not resolved (a delay would need endless points)
LIVE_DB = -60.0
# grid refinement limits for models: phase/gain steps between neighbours
MAX_PHASE_STEP_DEG = 2.0
MAX_DB_STEP = 1.0
MAX_RETURN_STEP_DEG = 5.0      # step of ∠(1+T) (for the winding count)
MAX_POINTS = 200_000


def dense_grid(fn: LoopFn, f_min: float, f_max: float, points_per_decade: int,
                hints: Sequence[float]) -> tuple[np.ndarray, np.ndarray, bool]:
    """Evaluate ``fn`` on a log grid refined until neighbours differ by little."""
    decades = math.log10(f_max / f_min)
    x = np.linspace(math.log10(f_min), math.log10(f_max), max(int(decades * points_per_decade), 8) + 1)
    h = np.log10([v for v in hints if f_min < v < f_max])
    if h.size:   # around each hinted singularity: a fine local cluster (not on it: it may be a pole)
        local = (h[:, None] + np.linspace(-0.02, 0.02, 40)[None, :]).ravel()
        x = np.unique(np.concatenate([x, local[(local > x[0]) & (local < x[-1])]]))
    T = evaluate(fn, 10 ** x)
    capped = False
    for _ in range(40):
        dphi = np.degrees(np.abs(np.angle(T[1:] / T[:-1])))
        db = to_db(T)
        ddb = np.abs(np.diff(db))
        dret = np.degrees(np.abs(np.angle((1 + T[1:]) / (1 + T[:-1]))))
        live = np.maximum(db[:-1], db[1:]) > LIVE_DB      # phase detail matters above -60 dB
        near = np.minimum(np.abs(db[:-1]), np.abs(db[1:])) < 40.0
        bad = ((dphi > MAX_PHASE_STEP_DEG) & live) | ((ddb > MAX_DB_STEP) & near) \
            | (dret > MAX_RETURN_STEP_DEG)
        bad &= np.diff(x) > 1e-12
        if not bad.any():
            break
        if x.size + int(bad.sum()) > MAX_POINTS:
            capped = True
            break
        xm = 0.5 * (x[:-1][bad] + x[1:][bad])
        Tm = evaluate(fn, 10 ** xm)
        order = np.argsort(np.concatenate([x, xm]), kind="stable")
        x = np.concatenate([x, xm])[order]
        T = np.concatenate([T, Tm])[order]
    return 10 ** x, T, capped


def evaluate(fn: LoopFn, f: np.ndarray) -> np.ndarray:
    """``fn(f)`` checked; a point that lands exactly on an undamped pole or zero is
    taken 1e-9 (relative) above it instead."""
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        T = np.asarray(fn(f), dtype=complex).reshape(-1)
        if T.shape != f.shape:
            raise InputError(f"the loop function returned {T.size} values for {f.size} frequencies")
        bad = ~np.isfinite(T) | (T == 0)
        if bad.any():
            T[bad] = np.asarray(fn(f[bad] * (1 + 1e-9)), dtype=complex).reshape(-1)
    if not np.all(np.isfinite(T)) or np.any(T == 0):
        bad = f[~np.isfinite(T) | (T == 0)][0]
        raise InputError(f"the loop gain is zero or not finite at {bad:.4g} Hz (a pole or zero on "
                         "the imaginary axis inside the band?)")
    return T


def model_band(model, *, margin_decades: float = 3.0) -> tuple[float, float]:
    """A band (Hz) that holds every singularity of ``model`` and its crossover.

    Starts ``margin_decades`` below the lowest non-zero pole/zero and above
    the highest, then widens until |T| < 0.3 at the top (and, with
    integrators, > 3 at the bottom).
    """
    sing = np.abs(np.concatenate([model.poles, model.zeros])) / (2 * np.pi)
    sing = sing[sing > 0]
    lo = (sing.min() if sing.size else 1.0) * 10 ** -margin_decades
    hi = (sing.max() if sing.size else 1.0) * 10 ** margin_decades
    n_int = int(np.sum(model.poles == 0))
    for _ in range(30):
        g_hi = abs(model.response(np.array([hi]))[0])
        g_prev = abs(model.response(np.array([hi / 10]))[0])
        # stop when |T| is small, or flat (a biproper loop settles at |T(∞)|)
        if g_hi < 0.3 or abs(g_hi / g_prev - 1) < 0.01:
            break
        hi *= 10
    if model.delay_s > 0:
        # above everything else a delay only spins the phase: keep ~30 turns of it
        hi = min(hi, max(30.0 / model.delay_s, 10 * (sing.max() if sing.size else 0.0),
                         top_crossing_hz(model, lo, hi)))
    for _ in range(30):
        if n_int == 0 or abs(model.response(np.array([lo]))[0]) > 3.0:
            break
        lo /= 10
    return float(lo), float(hi)


def top_crossing_hz(model, lo: float, hi: float) -> float:
    """Highest frequency (Hz) on a coarse grid where |T| >= 1 (0 if none): keep it in band."""
    f = np.logspace(math.log10(lo), math.log10(hi), 2000)
    above = np.flatnonzero(np.abs(model.response(f)) >= 1.0)
    return float(f[min(above[-1] + 1, f.size - 1)]) * 2 if above.size else 0.0
