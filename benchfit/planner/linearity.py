"""The linearity check: does the response change when the level is halved or doubled?

A loop that is driven too hard saturates somewhere (error amplifier,
modulator) and the gain read at the crossover falls.  At a few frequencies
around the crossover the planner measures at ``L/2``, ``L`` and ``2L`` and
compares each with the reading at ``L``; :func:`level_changes_response` is
the rule that says whether a difference is more than the noise, and
:func:`linear_level_range` turns the comparisons into the range of levels
that stayed linear.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from benchfit import numfmt

#: A level change is flagged when the readings differ by more than this many σ of
#: their difference (complex): P(|e| > 4σ) = exp(-16) for noise alone.
CHANGE_SIGMAS = 4.0
#: Frequencies of the check, in decades from the crossover.
CHECK_OFFSETS_DECADES = (-0.1, 0.0, 0.1)


def level_changes_response(h_ref: complex, sigma_ref: float, h_other: complex, sigma_other: float,
                           n_sigmas: float = CHANGE_SIGMAS) -> bool:
    """True when two readings of one point at different levels differ beyond their noise.

    Evidence weighed: the two mean readings and their σ (complex, absolute).
    Independent noise adds in quadrature, so the difference has σ
    ``sqrt(σ_ref² + σ_other²)``; more than ``n_sigmas`` of it is not noise.
    """
    s = math.hypot(sigma_ref, sigma_other)
    return abs(h_other - h_ref) > n_sigmas * max(s, 1e-15 * abs(h_ref))


@dataclass(frozen=True)
class LevelComparison:
    """One frequency measured at the reference level and at another."""

    freq_hz: float
    level_v: float
    ref_level_v: float
    change_db: float
    change_deg: float
    allowed_db: float
    changed: bool

    def to_dict(self) -> dict[str, Any]:
        return dict(self.__dict__)

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> LevelComparison:
        return cls(**{k: d[k] for k in cls.__dataclass_fields__})


def compare(freq_hz: float, ref_level: float, h_ref: complex, s_ref: float, level: float,
            h: complex, s: float) -> LevelComparison:
    """The comparison of one reading at ``level`` with the reference reading."""
    ratio = h / h_ref
    allowed = CHANGE_SIGMAS * math.hypot(s_ref, s) / abs(h_ref)
    return LevelComparison(
        freq_hz=float(freq_hz), level_v=float(level), ref_level_v=float(ref_level),
        change_db=float(20 * math.log10(abs(ratio))), change_deg=float(math.degrees(np.angle(ratio))),
        allowed_db=float(20 * math.log10(1 + allowed)),
        changed=level_changes_response(h_ref, s_ref, h, s))


@dataclass(frozen=True)
class LinearityResult:
    """What the linearity check found.

    Attributes
    ----------
    linear
        True when no level tested changed the response.
    linear_from_v, linear_to_v
        The range of tested levels that agreed with each other (nan when none did).
    level_v
        The level the capture continues at.
    comparisons
        Every comparison made.
    message
        One plain sentence for the user.
    """

    linear: bool
    linear_from_v: float
    linear_to_v: float
    level_v: float
    comparisons: tuple[LevelComparison, ...] = field(default_factory=tuple)
    message: str = ""

    def to_dict(self) -> dict[str, Any]:
        return {"linear": self.linear, "linear_from_v": self.linear_from_v,
                "linear_to_v": self.linear_to_v, "level_v": self.level_v,
                "comparisons": [c.to_dict() for c in self.comparisons], "message": self.message}

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> LinearityResult:
        return cls(linear=bool(d["linear"]), linear_from_v=float(d["linear_from_v"]),
                   linear_to_v=float(d["linear_to_v"]), level_v=float(d["level_v"]),
                   comparisons=tuple(LevelComparison.from_dict(c) for c in d.get("comparisons", ())),
                   message=str(d.get("message", "")))


def linear_level_range(ref_level: float, comparisons: Sequence[LevelComparison]) -> tuple[float, float]:
    """The range of levels (V) shown linear by comparisons against ``ref_level``.

    Evidence weighed: for each level tried, whether any frequency changed.  The
    reference counts as linear when the lower levels agree with it; a higher
    level that agrees extends the range up, and a lower one that agrees extends
    it down.  When a lower level disagrees, the reference itself is already
    too high: the range is then the lower levels that agree with each other,
    unknown here, so (nan, nan) is returned and the caller halves the level.
    """
    by_level: dict[float, bool] = {}
    for c in comparisons:
        by_level[c.level_v] = by_level.get(c.level_v, False) or c.changed
    lower_bad = any(bad for lv, bad in by_level.items() if lv < ref_level)
    if lower_bad:
        return (math.nan, math.nan)
    lo = min([lv for lv in by_level if lv < ref_level] + [ref_level])
    hi = ref_level
    for lv in sorted(lv for lv in by_level if lv > ref_level):
        if by_level[lv]:
            break
        hi = lv
    return (lo, hi)


def check_frequencies(crossover_hz: float, band: tuple[float, float]) -> list[float]:
    """Where to check: the crossover and a tenth of a decade either side, inside the band."""
    out = []
    for d in CHECK_OFFSETS_DECADES:
        f = crossover_hz * 10 ** d
        if band[0] <= f <= band[1]:
            out.append(float(f))
    return out


@dataclass(frozen=True)
class LevelVerdict:
    """What the capture does after a check: the sentence for the user, the level to go on at,
    and whether the sentence is a warning."""

    message: str
    level_v: float
    warn: bool


def level_verdict(ref_level: float, comparisons: Sequence[LevelComparison], *, auto_level: bool,
                  halvings: int, max_halvings: int) -> LevelVerdict:
    """The capture's answer to one linearity check at ``ref_level``.

    Evidence weighed: the comparisons and :func:`linear_level_range`.  Nothing
    changed: linear, go on.  A higher level changed the response but the lower
    agreed: the reference lies inside the linear range, go on at it.  Already
    half the reference reads differently: the reference is too high; with
    ``auto_level`` it is halved (the check runs again at the new level) until
    ``max_halvings`` halvings were made, otherwise the user is told to lower it.
    """
    v = lambda x: numfmt.eng(x, "V")  # noqa: E731
    lo, hi = linear_level_range(ref_level, comparisons)
    changed = [c for c in comparisons if c.changed]
    if not changed:
        return LevelVerdict(f"linear: halving and doubling the level ({v(ref_level)}) changed nothing "
                            f"beyond the noise; linear from {v(lo)} to {v(hi)}", ref_level, False)
    worst = max(changed, key=lambda c: abs(c.change_db))
    if math.isnan(lo):
        span = f"not linear at {v(ref_level)}: already {v(ref_level / 2)} reads differently"
    else:
        span = f"linear from {v(lo)} to {v(hi)}"
    msg = (f"NOT linear: at {v(worst.level_v)} the response at {numfmt.eng(worst.freq_hz, 'Hz')} "
           f"changed by {worst.change_db:+.2f} dB / {worst.change_deg:+.2f}° (noise allows "
           f"±{worst.allowed_db:.2f} dB); {span}")
    if not math.isnan(lo):
        return LevelVerdict(msg + f"; continuing at {v(ref_level)}, inside it", ref_level, False)
    if not auto_level:
        return LevelVerdict(msg + "; lower --level or pass --auto-level", ref_level, True)
    if halvings < max_halvings:
        return LevelVerdict(msg + f"; continuing at {v(ref_level / 2)} (--auto-level), checked again "
                            "there", ref_level / 2, False)
    return LevelVerdict(msg + f"; still not linear after {max_halvings} halvings of the level",
                        ref_level, True)
