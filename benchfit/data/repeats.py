"""Repeated frequencies: harmless repeats of one point, or two measurements that disagree.

:func:`order_and_average` sorts a sweep and averages its repeated frequencies.
A sweep that goes up and back down, or an analyzer that measures a point twice,
repeats frequencies; their values agree within the noise and are averaged.  A
file that holds two different measurements under the same frequencies (an edit
gone wrong, a second run appended) repeats them too, but the values disagree
far beyond the noise, and averaging them would hide that.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

#: Smallest disagreement that can count as "far beyond the noise", whatever the sweep's
#: scatter: 1 dB in gain or 6 degrees in phase (common practice, no source: repeats of one
#: point on a bench analyzer agree to a small fraction of that).
FLOOR_DB = 1.0
FLOOR_DEG = 6.0
#: How many times the sweep's own point-to-point scatter a disagreement must exceed.
FACTOR = 10.0
#: A disagreement beyond 6 dB or 30 degrees is reported whatever the scatter: on a coarse
#: sweep the scatter is mostly the curve's own bending, not noise (common practice, no source).
CEIL_DB = 6.0
CEIL_DEG = 30.0


@dataclass(frozen=True)
class Disagreement:
    """One repeated frequency whose values disagree: where and by how much."""

    freq_hz: float
    lines: tuple[int, ...]
    spread_db: float
    spread_deg: float


def _scatter(x: np.ndarray) -> float:
    """Median distance of each point from the mean of its two neighbours (a noise scale)."""
    if x.size < 3:
        return 0.0
    return float(np.median(np.abs(x[1:-1] - 0.5 * (x[:-2] + x[2:]))))


def disagreeing_repeats(f: np.ndarray, h: np.ndarray, lines: np.ndarray | None,
                        ) -> tuple[list[Disagreement], float, float]:
    """Repeated frequencies whose values disagree far beyond the sweep's noise.

    Evidence weighed: for each repeated frequency, the spread of its repeats in gain
    (dB between the largest and smallest magnitude) and in phase (degrees between the
    extreme angles about their mean); against the sweep's own scatter (the median
    distance of each point of the averaged sweep from the mean of its neighbours, in
    dB and degrees).  A repeat disagrees when its spread, in gain or in phase, exceeds
    :data:`FACTOR` times that scatter and the floor (:data:`FLOOR_DB`, :data:`FLOOR_DEG`),
    or exceeds the ceiling (:data:`CEIL_DB`, :data:`CEIL_DEG`) whatever the scatter.

    Parameters
    ----------
    f, h
        Frequencies (sorted, with repeats) and complex values.
    lines
        File line of each point, or None.

    Returns
    -------
    (disagreements, scatter_db, scatter_deg)
    """
    uniq, inv, counts = np.unique(f, return_inverse=True, return_counts=True)
    if uniq.size == f.size:
        return [], 0.0, 0.0
    with np.errstate(divide="ignore", invalid="ignore"):
        db = 20 * np.log10(np.abs(h))
    mean = (np.bincount(inv, weights=h.real, minlength=uniq.size)
            + 1j * np.bincount(inv, weights=h.imag, minlength=uniq.size)) / counts
    with np.errstate(divide="ignore", invalid="ignore"):
        mean_db = 20 * np.log10(np.abs(mean))
        rel_deg = np.degrees(np.angle(h * np.conj(mean[inv])))
    mean_deg = np.degrees(np.unwrap(np.angle(mean)))
    finite = np.isfinite(mean_db)
    noise_db = _scatter(mean_db[finite]) if finite.any() else 0.0
    noise_deg = _scatter(mean_deg)
    lim_db = min(max(FLOOR_DB, FACTOR * noise_db), CEIL_DB)
    lim_deg = min(max(FLOOR_DEG, FACTOR * noise_deg), CEIL_DEG)
    out = []
    for u in np.flatnonzero(counts > 1):
        idx = np.flatnonzero(inv == u)
        vals = db[idx]
        spread_db = float(np.max(vals) - np.min(vals)) if np.all(np.isfinite(vals)) else float("inf")
        spread_deg = float(np.max(rel_deg[idx]) - np.min(rel_deg[idx]))
        if spread_db > lim_db or spread_deg > lim_deg:
            where = tuple(int(x) for x in lines[idx]) if lines is not None else ()
            out.append(Disagreement(float(uniq[u]), where, spread_db, spread_deg))
    return out, noise_db, noise_deg


def repeats_warning(found: list[Disagreement], noise_db: float, noise_deg: float) -> str:
    """The warning that names disagreeing repeats (the worst first)."""
    worst = sorted(found, key=lambda x: -max(x.spread_db / FLOOR_DB, x.spread_deg / FLOOR_DEG))
    shown = "; ".join(
        f"{x.freq_hz:g} Hz" + (f" (lines {', '.join(map(str, x.lines[:4]))})" if x.lines else "")
        + f": {x.spread_db:.3g} dB, {x.spread_deg:.3g}° apart" for x in worst[:3])
    more = f"; and {len(found) - 3} more" if len(found) > 3 else ""
    return (f"{len(found)} frequenc{'ies appear' if len(found) != 1 else 'y appears'} more than "
            "once with values that disagree far beyond the sweep's scatter "
            f"({noise_db:.2g} dB, {noise_deg:.2g}°): "
            f"{shown}{more}; they were averaged, which hides the disagreement: check the file "
            "(two measurements in one?)")


def order_and_average(f: np.ndarray, h: np.ndarray, extras: dict[str, np.ndarray], lines: np.ndarray | None,
           warnings: list[str]) -> tuple[np.ndarray, np.ndarray, dict[str, np.ndarray], str]:
    """Sort by frequency and average repeated frequencies (warning loudly when they disagree)."""
    steps = np.diff(f)
    order = "ascending"
    if np.all(steps < 0):
        order = "descending (sorted)"
    elif not np.all(steps > 0):
        order = "mixed (sorted)" if np.any(steps < 0) else "ascending"
    if order != "ascending":
        idx = np.argsort(f, kind="stable")
        f, h = f[idx], h[idx]
        lines = lines[idx] if lines is not None else None
        extras = {k: v[idx] for k, v in extras.items()}
        if order.startswith("mixed"):
            warnings.append("frequencies were out of order; sorted")
    uniq, inv, counts = np.unique(f, return_inverse=True, return_counts=True)
    if uniq.size != f.size:
        n_dup = int(np.sum(counts > 1))
        found, noise_db, noise_deg = disagreeing_repeats(f, h, lines)
        if found:
            warnings.append(repeats_warning(found, noise_db, noise_deg))
        else:
            warnings.append(f"{n_dup} frequencies appear more than once; their values agree within "
                            "the sweep's scatter and were averaged")

        def avg(v):
            return np.bincount(inv, weights=v, minlength=uniq.size) / counts

        h = avg(h.real) + 1j * avg(h.imag)
        extras = {k: avg(v) for k, v in extras.items()}
        f = uniq
    return f, h, extras, order
