"""The last step of a stage placement: the target crossing refined on the exact margins.

The placement sweep (:mod:`benchfit.loop.stage_synthesis`) judges every row on
a log grid of the plant's band, which reads a phase margin up to ~2° off the
exact one (the crossing and the phase between grid points are interpolated).
:func:`refine_on_exact` takes the sweep's bracket of the target and bisects
the placement variable again, judging each setting with the dense nominal
analysis (:meth:`benchfit.loop.loopgain.Loop.margins`, the margins the design
reports) and the one pass rule (:func:`benchfit.loop.passrules.margins_meet`,
the rule of ``targets_met`` and of the Monte Carlo yield).  An ideal design
then meets its target exactly and lies above it by the bisection's
resolution only; where the exact margin jumps past the target (a crossing
appears or vanishes) the setting on the passing side is kept and its exact
margin reported.
"""

from __future__ import annotations

import math
from collections.abc import Callable

from benchfit.loop.loopgain import Loop, LoopPlant
from benchfit.loop.passrules import margins_meet
from benchfit.loop.stage_networks import StageNetwork
from benchfit.loop.targets import Targets

#: Bisection steps on the exact margins (a bracket of a sweep step shrinks by 2**-EXACT_STEPS).
EXACT_STEPS = 40
#: Widening steps (doubling from 1/64 of a sweep step) searched for the exact bracket.
WIDEN_STEPS = 12


def exact_margins(lp: LoopPlant, net: StageNetwork):
    """The nominal (dense) margins of T = Aol · network, as the design reports them."""
    return Loop(lp, net, None).margins()


def exact_pm(m) -> float:
    """The smallest phase margin over every gain crossing of ``m`` (the main one's if none listed)."""
    pm, worst = m.phase_margin_deg, m.min_phase_margin_deg
    return float(min(pm, worst)) if math.isfinite(worst) else float(pm)


def refine_on_exact(net_at: Callable[[float], StageNetwork], lp: LoopPlant, targets: Targets,
                    fail_log: float, pass_log: float, step_log: float,
                    bounds_log: tuple[float, float]) -> tuple[float, object, bool]:
    """Bisect the placement variable (log10 x) where the exact margins cross the target.

    Evidence weighed: the exact margins of each trial setting under
    :func:`~benchfit.loop.passrules.margins_meet` (stable, every crossing at
    or above its target, no slack).  The sweep's bracket (``fail_log`` fails,
    ``pass_log`` passes on the grid) is moved until the exact rule also fails
    on one side and passes on the other: from ``pass_log`` outward in steps
    doubling from ``step_log``/64, within ``bounds_log`` (the sweep's range).

    Returns
    -------
    x, margins, bracketed
        The passing setting nearest the exact crossing, its exact margins,
        and False when no exact bracket was found near the sweep's (the
        sweep's passing setting is then kept if it passes exactly, else the
        nearest passing setting found; margins say how it stands).
    """
    lo_b, hi_b = min(bounds_log), max(bounds_log)
    cache: dict[float, tuple[bool, object]] = {}

    def judge(xl: float) -> tuple[bool, object]:
        if xl not in cache:
            m = exact_margins(lp, net_at(10.0 ** xl))
            cache[xl] = (margins_meet(m, targets), m)
        return cache[xl]

    u = 1.0 if fail_log > pass_log else -1.0   # direction toward failing settings
    ok_b, m_b = judge(pass_log)
    a = b = None
    if ok_b:
        b = pass_log
        for j in range(WIDEN_STEPS):
            c = min(max(pass_log + u * step_log * 2.0 ** (j - 6), lo_b), hi_b)
            if not judge(c)[0]:
                a = c
                break
            b = c
    else:
        a = pass_log
        for j in range(WIDEN_STEPS):
            c = min(max(pass_log - u * step_log * 2.0 ** (j - 6), lo_b), hi_b)
            if judge(c)[0]:
                b = c
                break
            a = c
    if a is None or b is None:
        xl = b if b is not None else pass_log
        return 10.0 ** xl, judge(xl)[1], False
    for _ in range(EXACT_STEPS):
        mid = 0.5 * (a + b)
        if judge(mid)[0]:
            b = mid
        else:
            a = mid
    return 10.0 ** b, judge(b)[1], True
