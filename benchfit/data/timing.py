"""What the time column of a scope export says about how it was sampled.

A time column is used as written, so a gap, a change of sample rate or jitter
do not make times wrong; but step measurements assume a steady record, and each
of these usually means something went wrong on the way (samples lost, two
records joined, a scope in a segmented or equivalent-time mode).  They are
reported as warnings.  Repeated time stamps are a different matter: rows
repeated exactly are duplicates (:func:`duplicate_rows`), and repeats the
printed digits cannot explain are an error of the reader that calls this.
"""

from __future__ import annotations

import re

import numpy as np

#: A step longer than this many median steps is a gap (common practice, no source).
GAP_FACTOR = 1.5
#: Relative spread of the steps above which they count as jitter (common practice, no source).
JITTER_REL = 0.01
#: Shortest run of alike steps that counts as a sample rate of its own.
MIN_RUN = 4


_PRINTED = re.compile(r"^[\"']?[+-]?\d*(?:[.,](\d*))?(?:[eE]([+-]?\d+))?[\"']?$")


def printed_step(cells: list[str]) -> float:
    """The step of the last printed digit of numbers as written: 0.001 for '12.345',
    1e-13 for '1.000000000e-04', 1 for '17'; the coarsest among ``cells``.

    Cells that are not plain numbers, and zeros (whose exponent says nothing:
    '0.000000000e+00'), are passed over; 0.0 when none is left.
    """
    step = 0.0
    for c in cells:
        m = _PRINTED.match(c.strip())
        if m and any(ch in "123456789" for ch in c.lower().split("e")[0]):
            step = max(step, 10.0 ** (int(m.group(2) or 0) - len(m.group(1) or "")))
    return step


def duplicate_rows(data: np.ndarray) -> np.ndarray:
    """Indices of rows equal, in every column, to the row before (a duplicated export row)."""
    if data.shape[0] < 2:
        return np.zeros(0, dtype=int)
    same = np.all(data[1:] == data[:-1], axis=1)
    return np.flatnonzero(same) + 1


def straight_line(t: np.ndarray) -> tuple[float, float]:
    """(step, start) of the least-squares line through ``t`` against the sample index
    (closed form: no rank warning on a degenerate axis)."""
    k = np.arange(t.size, dtype=float)
    km = k.mean()
    var = float(np.sum((k - km) ** 2))
    slope = float(np.sum((k - km) * (t - t.mean())) / var) if var > 0 else 0.0
    return slope, float(t.mean() - slope * km)


def rounding_explains_repeats(t: np.ndarray, resolution: float) -> bool:
    """True when repeated time stamps come from printing too few digits.

    Evidence weighed: the printed times must lie within one print step of an evenly
    spaced line, and the line's step must be smaller than the print step (only then
    can two samples print the same time).  Stamps printed with digits to spare that
    still repeat (a record with every time written twice) are not explained.
    """
    k = np.arange(t.size)
    slope, start = straight_line(t)
    step = float(np.min(np.diff(t)[np.diff(t) > 0])) if np.any(np.diff(t) > 0) else 0.0
    res = max(resolution, step)
    uniform = start + slope * k
    return bool(slope > 0 and np.max(np.abs(t - uniform)) <= res and slope < res * 1.001
                and resolution >= slope * 0.999)


def time_axis_findings(t: np.ndarray, line_no: np.ndarray, resolution: float) -> list[str]:
    """Warnings about a strictly increasing time axis: gaps, a change of rate, jitter.

    Parameters
    ----------
    t
        Times in s, strictly increasing.
    line_no
        File line of each time.
    resolution
        The print step of the times, in s (:func:`printed_step`); differences
        within two print steps are the digits, not the sampling.

    Evidence weighed: each step against the median step.  A step above
    :data:`GAP_FACTOR` median steps (beyond the digits) is a gap.  Runs of at least
    :data:`MIN_RUN` alike steps with different lengths are a change of sample rate.
    Otherwise steps spread by more than :data:`JITTER_REL` of the median (beyond the
    digits) are jitter.
    """
    out: list[str] = []
    steps = np.diff(t)
    if steps.size < 2:
        return out
    med = float(np.median(steps))
    slack = 2 * resolution + 1e-9 * float(np.max(np.abs(t)))
    # runs of alike steps: a run ends where a step differs from the one before beyond the digits
    differs = np.abs(np.diff(steps)) > slack + 0.002 * steps[:-1]
    bounds = np.concatenate(([0], np.flatnonzero(differs) + 1, [steps.size]))
    in_long = np.zeros(steps.size, dtype=bool)
    long_runs = []  # (first step, count, step)
    for lo, hi in zip(bounds[:-1], bounds[1:], strict=True):
        if hi - lo >= MIN_RUN:
            in_long[lo:hi] = True
            long_runs.append((int(lo), int(hi - lo), float(np.median(steps[lo:hi]))))
    changes = [(x, y) for x, y in zip(long_runs, long_runs[1:], strict=False)
               if abs(x[2] - y[2]) > slack + 0.01 * min(x[2], y[2])]
    # a long step that is not part of a steady stretch of such steps is a gap
    long_step = steps > GAP_FACTOR * med + slack
    if changes:
        long_step &= ~in_long
    gaps = np.flatnonzero(long_step)
    if gaps.size:
        i = int(gaps[0])
        out.append(f"the time column jumps by {steps[i]:.4g} s ({steps[i] / med:.3g} sample "
                   f"intervals of {med:.4g} s) at line {int(line_no[i + 1])}"
                   + (f", and {len(gaps) - 1} more gap{'s' if len(gaps) > 2 else ''}" if len(gaps) > 1 else "")
                   + ": samples missing or records joined? times are used as written")
    if changes:
        a, b = changes[0]
        out.append(f"the sample interval changes from {a[2]:.4g} s to {b[2]:.4g} s at line "
                   f"{int(line_no[b[0] + 1])}" + (f" ({len(changes)} changes)" if len(changes) > 1 else "")
                   + ": times are used as written")
    elif steps.size >= 3:
        ok = np.ones(steps.size, dtype=bool)
        ok[gaps] = False
        dev = np.abs(steps[ok] - med)
        if dev.size and float(np.max(dev)) > slack and float(np.std(steps[ok])) > JITTER_REL * med:
            out.append(f"the time steps vary by up to {100 * float(np.max(dev)) / med:.3g} % of the "
                       f"median interval {med:.4g} s (jitter beyond the printed digits): times are "
                       "used as written")
    return out
