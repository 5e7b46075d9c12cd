"""Bounds that keep a parameter the user holds at the rank its name gives.

Groups of one kind are numbered from the lowest frequency up (docs/fitting.md),
so ``--bound zero2_hz=70k:`` is about the second-lowest zero.  The refinement
itself works on fixed slots; left alone, it can honour the bound on the slot
while another zero of the same kind moves into its place (zero2 goes to
1e18 Hz, zero3 comes down to 60 kHz), and the lowest-first renumbering then
gives the user's name to a parameter the bound never touched.
:func:`rank_bounds` closes that route.
"""

from __future__ import annotations

import re

import numpy as np

from benchfit.fitting.parameters import Structure

_FREQ = re.compile(r"^(pole|pair|zero_pair|zero)(\d+)_(hz|f0_hz)$")


def magnitude_range(lo: float, hi: float) -> tuple[float, float]:
    """The range of |x| that a signed bound [lo, hi] allows."""
    if lo >= 0:
        return lo, hi
    if hi <= 0:
        return -hi, -lo
    return 0.0, max(-lo, hi)


def rank_bounds(st: Structure, values: np.ndarray, bounds: dict[str, tuple[float, float]],
                fixed: dict[str, float] | None = None) -> dict[str, tuple[float, float]]:
    """The user's bounds plus those that keep each bounded or fixed frequency at its rank.

    Evidence weighed: the start ``values`` (numbered lowest first) and the
    magnitude range ``[a, b]`` the user allows the held frequency of group
    ``k`` (a fixed one: a = b = its value).  Every other group of the same kind
    with a higher number must keep ``|f| ≥ a`` and every lower one ``|f| ≤ b``,
    on the side of zero where it starts (a real pole or zero that changes sign
    passes through 0 Hz or infinity, which the bounds also forbid).  Pair
    frequencies are positive, so their bound is direct.  Nothing is added for
    groups whose start already breaks the order, nor where the user bounds the
    group too: their own bound stands.  A bounded range that spans zero
    (``--bound zero1_hz=:50k``) is narrowed to the side of zero where the group
    starts, for the same reason: through the sign the group could leave the
    range's intent while keeping to its letter, and another take its name.
    """
    out = dict(bounds)
    held: dict[str, tuple[float, float]] = {k: v for k, v in bounds.items() if _FREQ.match(k)}
    for k, x in (fixed or {}).items():
        if _FREQ.match(k):
            held[k] = (float(x), float(x))
    if not held:
        return out
    v = dict(zip(st.names, np.asarray(values, dtype=float), strict=True))
    for name, (lo, hi) in list(held.items()):
        if name in v and name in bounds and lo < 0 < hi and v[name] != 0:
            # a range across zero holds its group on the side it starts: ``:50k`` is a zero
            # below 50 kHz, not one that escapes to -20 MHz (an RHP zero is "below" too)
            lo, hi = (0.0, hi) if v[name] > 0 else (lo, 0.0)
            held[name] = out[name] = (lo, hi)
    for name, (lo, hi) in held.items():
        m = _FREQ.match(name)
        if name not in v:
            continue
        kind, rank, key = m.group(1), int(m.group(2)), m.group(3)
        a, b = magnitude_range(float(lo), float(hi))
        for other, x in v.items():
            mo = _FREQ.match(other)
            if other in held or mo is None or mo.group(1) != kind or mo.group(3) != key or x == 0:
                continue
            above = int(mo.group(2)) > rank
            edge = a if above else b
            if (above and (edge <= 0 or abs(x) < edge)) or (not above and (
                    not np.isfinite(edge) or abs(x) > edge)):
                continue
            olo, ohi = out.get(other, (-np.inf, np.inf))
            if x > 0:
                olo, ohi = (max(olo, edge), ohi) if above else (max(olo, 0.0), min(ohi, edge))
            else:
                olo, ohi = (olo, min(ohi, -edge)) if above else (max(olo, -edge), min(ohi, 0.0))
            out[other] = (olo, ohi)
    return out
