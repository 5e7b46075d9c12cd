"""Placing a compensation network's poles and zeros: K factor and 1/beta crossing.

The closed forms (K factor, Venable 1983; the 1/beta rate of closure) are in
:mod:`benchfit.loop.kfactor`; this module chooses the crossover and the design
phase margin and says whether the targets are met.  What the targets are and
the record of a placement (:class:`~benchfit.loop.targets.Targets`,
:class:`~benchfit.loop.targets.Synthesis`) are in :mod:`benchfit.loop.targets`.

**Finite op-amp and several plants (corners).**  The closed-form placement
is exact for one plant and an ideal op-amp.  Otherwise the placement is
repeated with a larger design phase margin (and the gain corrected so
|T(fc)| = 1 on the first corner with the real op-amp) until the worst corner
meets the targets.  With ``crossover_hz=None`` the highest crossover in the
plants' common band that meets every target is chosen.

**When a candidate meets the targets.**  By the rule that judges the
design's ``targets_met``, its snapping and its yield
(:mod:`benchfit.loop.passrules`: stable, every counted crossing at or above
its target, no slack), screened on the Monte Carlo's feature grid and
verified with the dense analysis before it is returned
(:mod:`benchfit.loop.synthjudge`).  A placement that misses is returned (a
given crossover) or refused (automatic) with the dense analysis's numbers.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Sequence

import numpy as np

from benchfit import numfmt
from benchfit.errors import DesignError, InputError
from benchfit.loop.choices import METHODS
from benchfit.loop.closure import rate_of_closure_db
from benchfit.loop.kfactor import (
    BOOST_LIMITS,
    NETWORK_SLOPE_DB,
    boost_needed,
    k_from_boost,
    place,
    plant_slope_db,
    rate_of_closure,
    wrap_deg,
)
from benchfit.loop.loopgain import LoopPlant
from benchfit.loop.networks import Network, check_kind
from benchfit.loop.opamp import OpAmp
from benchfit.loop.passrules import check_crossings, describe
from benchfit.loop.synthjudge import (
    Verification,
    closest_candidate,
    miss_text,
    screen,
    verify,
)
from benchfit.loop.targets import Synthesis, Targets

#: the closed forms, importable from here as before
__all__ = ["BOOST_LIMITS", "NETWORK_SLOPE_DB", "Synthesis", "Targets", "boost_needed",
           "check_crossover_in_band", "choose_automatic", "closes_near_20db", "common_band",
           "extra_margins", "k_from_boost", "place", "plant_slope_db", "rate_of_closure",
           "synthesize", "wrap_deg"]

# Extra design phase margins tried, in degrees, when one closed-form placement is not enough.
_EXTRA_PM = (0.0, 0.25, 0.5, 1.0, 2.0, 3.0, 4.0, 6.0, 8.0, 10.0, 13.0, 16.0, 20.0, 25.0, 30.0,
             40.0, 50.0, 65.0, 80.0)


# ----- search over design phase margin, crossover -------------------------------------------
def extra_margins(corners: Sequence[LoopPlant], opamp: OpAmp | None) -> tuple[float, ...]:
    """The design phase margins tried at one crossover, in degrees above the target.

    The evidence is whether the closed form is exact: with one plant and an
    ideal op-amp it places the phase margin at the crossover exactly, so only
    the target itself is tried (a network designed for more phase margin
    there is simply another design, chosen by the user's target).  With a
    finite op-amp or several corners the first corner's closed form is not
    the loop judged, and the placement is repeated for more phase margin
    (:data:`_EXTRA_PM`) until the worst corner meets the targets.
    """
    if len(corners) == 1 and opamp is None:
        return (0.0,)
    return _EXTRA_PM


#: Halvings of the design phase margin step between the last failing and the first passing
#: candidate (a search step only: the candidate kept is verified by the pass rule).
BISECTIONS = 6


class _Placer:
    """Placement at one crossover across corners with a possibly finite op-amp."""

    def __init__(self, kind: str, corners: Sequence[LoopPlant], targets: Targets, r_in: float,
                 opamp: OpAmp | None, crossings: str | tuple[float, float]) -> None:
        self.kind, self.corners, self.targets = kind, list(corners), targets
        self.r_in, self.opamp, self.crossings = r_in, opamp, crossings

    def network(self, fc: float, pm: float) -> tuple[Network, float, float, list[str]]:
        p_fc = complex(self.corners[0].response(np.array([fc]))[0])
        scale = 1.0
        net, boost, k, notes = place(self.kind, p_fc, fc, pm, self.r_in, scale)
        if self.opamp is not None:  # correct the gain so |T(fc)| = 1 with the real op-amp
            for _ in range(4):
                t = abs(p_fc * net.response(np.array([fc]), self.opamp)[0])
                if abs(t - 1) < 1e-9:
                    break
                scale /= t
                net, boost, k, notes = place(self.kind, p_fc, fc, pm, self.r_in, scale)
        return net, boost, k, notes

    def screen(self, net: Network, fc: float) -> tuple[bool, float]:
        """(passes the screening, worst-corner phase margin) of one candidate at ``fc``."""
        s = screen(self.corners, [net], self.opamp, fc, self.targets, self.crossings)
        return bool(s.passed[0]), float(s.pm_deg[0])

    def verify(self, net: Network, fc: float) -> Verification:
        return verify(self.corners, net, self.opamp, fc, self.targets, self.crossings)

    def at(self, fc: float) -> tuple[Synthesis | None, Synthesis | None, float]:
        """Placement at ``fc``: (verified synthesis or None, closest miss or None, its PM).

        The candidates (the target phase margin plus :func:`extra_margins`)
        are screened in order; the first that passes is refined by bisection
        on the design phase margin, and the dense analysis must then pass it
        (:func:`benchfit.loop.synthjudge.verify`), else the next screened
        candidate is tried.  When none is verified, the closest miss
        (:func:`benchfit.loop.synthjudge.closest_candidate`) is returned with
        its screening phase margin.
        """
        target = self.targets.phase_margin_deg
        cands, pms, first = [], [], None
        for extra in extra_margins(self.corners, self.opamp):
            try:
                cand = (target + extra, *self.network(fc, target + extra))
            except DesignError:
                break  # more boost than the network can give from here on
            ok, pm = self.screen(cand[1], fc)
            cands.append(cand)
            pms.append(pm)
            if ok:
                first = len(cands) - 1
                break
        if not cands:
            return None, None, -np.inf
        if first is not None:
            best = cands[first]
            if first > 0:  # bisect between the last failing and first passing design PM
                lo, hi = cands[first - 1][0], best[0]
                for _ in range(BISECTIONS):
                    mid = 0.5 * (lo + hi)
                    cand = (mid, *self.network(fc, mid))
                    if self.screen(cand[1], fc)[0]:
                        hi, best = mid, cand
                    else:
                        lo = mid
            if self.verify(best[1], fc).passed:
                return self._result(fc, best), None, pms[first]
            # screening passed it, the dense analysis did not: more design phase margin
            for extra in [e for e in extra_margins(self.corners, self.opamp)
                          if target + e > cands[first][0]]:
                try:
                    cand = (target + extra, *self.network(fc, target + extra))
                except DesignError:
                    break
                if self.screen(cand[1], fc)[0] and self.verify(cand[1], fc).passed:
                    return self._result(fc, cand), None, pms[first]
            return None, self._result(fc, best), pms[first]
        j = closest_candidate(pms)
        return None, self._result(fc, cands[j]), pms[j]

    def _result(self, fc: float, cand: tuple, method: str = "k-factor") -> Synthesis:
        pm, net, boost, k, notes = cand
        lp = self.corners[0]
        phase = math.degrees(np.angle(lp.response(np.array([fc]))[0]))
        # the placed network's own slope, not its asymptote (the figure the report quotes)
        roc = rate_of_closure_db(lp, lambda f: net.response(f, self.opamp), fc)
        return Synthesis(network=net, method=method, crossover_hz=float(fc),
                         plant_phase_deg=float(phase - 360.0 if phase > 0 else phase),
                         boost_deg=float(boost), k=float(k), design_pm_deg=float(pm),
                         rate_of_closure_db=roc, notes=tuple(notes))


def choose_automatic(found: Iterable[Synthesis]) -> tuple[Synthesis | None, bool]:
    """The automatic crossover: the first (highest) verified placement with practical parts.

    ``found`` yields the placements that meet the targets, highest crossover
    first; it is consumed only up to the first whose parts are all in the
    practical range (:meth:`Network.practical_warnings` is empty).  When
    none is, the highest placement meeting the targets is kept anyway.

    Returns
    -------
    (synthesis or None, practical)
    """
    highest = None
    for res in found:
        if not res.network.practical_warnings():
            return res, True
        highest = highest or res
    return highest, False


def closes_near_20db(roc_db) -> np.ndarray:
    """Whether a rate of closure is the one the 1/beta crossing method aims for: 20 dB/decade
    give or take 10 (between the 0 and 40 dB/decade that mark a marginal crossing; common
    practice, no source)."""
    return np.abs(np.asarray(roc_db, dtype=float) - 20.0) <= 10.0


def common_band(corners: Sequence[LoopPlant]) -> tuple[float, float]:
    """The band (Hz) every corner's plant is known on: highest low edge, lowest high edge."""
    return max(lp.band_hz[0] for lp in corners), min(lp.band_hz[1] for lp in corners)


def check_crossover_in_band(fc_hz: float, corners: Sequence[LoopPlant]) -> None:
    """Refuse a requested crossover outside the band the plant(s) are known on.

    Outside its fit band (or sweep span) a fitted model is an extrapolation and
    a sweep has no data: a network placed there is placed on a guess, and the
    loop it predicts can be anything (a crossover at 5 GHz on a 1 MHz fit
    gave an unstable loop with sub-femtofarad parts).  The band is the same
    one the automatic crossover searches.

    Raises
    ------
    DesignError
        Naming ``--crossover``, the value asked and the band allowed.
    """
    lo, hi = common_band(corners)
    if lo * (1 - 1e-9) <= fc_hz <= hi * (1 + 1e-9):
        return
    which = "above" if fc_hz > hi else "below"
    side, limit = (1, hi) if which == "above" else (0, lo)
    edge = [lp.name for lp in corners if lp.band_hz[side] == limit]  # the corner(s) setting it
    span = ("the band every plant is known on" if len(corners) > 1
            else "the band the plant is known on")
    raise DesignError(
        f"--crossover {numfmt.eng(fc_hz, 'Hz')} is {which} {span}, {numfmt.eng(lo, 'Hz')} to {numfmt.eng(hi, 'Hz')} (set by "
        f"{', '.join(edge)}: fit band, sweep span, or two decades past a bare model's poles and "
        "zeros); choose a crossover inside it, or measure and fit the plant over a band that "
        "holds it")


def synthesize(kind: str, corners: LoopPlant | Sequence[LoopPlant], targets: Targets, *,
               method: str = "k-factor", r_in: float = 10e3, opamp: OpAmp | None = None,
               candidates: int = 80, crossings: str | tuple[float, float] = "all") -> Synthesis:
    """Design a network of ``kind`` for the plant(s) ``corners``.

    Parameters
    ----------
    kind
        'type1', 'type2', 'type3' or 'pi'.
    corners
        One plant or several (load/temperature corners); the first is the
        nominal one the corners are placed on, the targets must hold on all.
    targets
        Crossover (or None for automatic), phase and gain margin minimums.
    method
        'k-factor' or 'crossing' (see the module text).
    r_in
        Input resistor R1 in ohm (sets the impedance level).
    opamp
        Finite op-amp, or None for an ideal one.
    candidates
        Number of crossover frequencies tried (automatic crossover only).
    crossings
        Which crossings must meet the targets ("all", "main" or a band in Hz,
        :mod:`benchfit.loop.passrules`), as for the design's ``targets_met``.

    Returns
    -------
    Synthesis
        Meeting the targets by the pass rule on the dense analysis, or (given
        crossover only) the closest miss with a note "targets not met at ...",
        quoting the dense analysis's shortfalls.

    Raises
    ------
    DesignError
        When no crossover in the plants' common band meets the targets
        (automatic: the message quotes the closest miss), the given crossover
        lies outside that band, or the network cannot give the boost needed
        (given crossover).
    """
    kind = check_kind(kind)
    if method not in METHODS:
        raise InputError(f"method {method!r} unknown; expected one of {', '.join(METHODS)}",
                         source="--method")
    if not (math.isfinite(r_in) and r_in > 0):
        raise InputError(f"input resistor {r_in!r}; expected a value > 0 ohm", source="--r-in")
    crossings = check_crossings(crossings)
    corners = [corners] if isinstance(corners, LoopPlant) else list(corners)
    if not corners:
        raise InputError("no plant given")
    placer = _Placer(kind, corners, targets, float(r_in), opamp, crossings)

    def finish(res: Synthesis, extra: list[str]) -> Synthesis:
        notes = list(res.notes) + extra
        roc = res.rate_of_closure_db
        if method == "crossing" and not closes_near_20db(roc):
            notes.append(f"rate of closure at {numfmt.eng(res.crossover_hz, 'Hz')} is {roc:.0f} dB/decade, "
                         "not the 20 dB/decade the crossing method aims for")
        return Synthesis(**{**res.__dict__, "method": method, "notes": tuple(notes)})

    if targets.crossover_hz is not None:
        fc = float(targets.crossover_hz)
        check_crossover_in_band(fc, corners)
        res, fallback, _ = placer.at(fc)
        if res is not None:
            return finish(res, [])
        if fallback is None:
            # not even the target phase margin can be placed: say why
            place(kind, complex(corners[0].response(np.array([fc]))[0]), fc,
                  targets.phase_margin_deg, r_in)
            raise DesignError(f"no {kind} placement at {numfmt.eng(fc, 'Hz')}")
        why = miss_text(placer.verify(fallback.network, fc))
        return finish(fallback, [f"targets not met at {numfmt.eng(fc, 'Hz')}: {why}"])
    lo, hi = common_band(corners)
    if opamp is not None:
        hi = min(hi, opamp.gbw_hz)
    if not hi > lo * 1.01:
        raise DesignError(f"the plants' common band {numfmt.eng(lo, 'Hz')} to {numfmt.eng(hi, 'Hz')} is empty")
    # keep clear of the band edges: slopes and data near them are least trusted
    grid = np.logspace(np.log10(lo * 2), np.log10(hi / 2), candidates)[::-1]
    if method == "crossing":
        grid = grid[closes_near_20db(rate_of_closure(kind, corners[0], grid))]
        if grid.size == 0:
            raise DesignError(f"nowhere in {numfmt.eng(lo, 'Hz')} to {numfmt.eng(hi, 'Hz')} does a {kind} network meet the "
                              "plant with a 20 dB/decade rate of closure; try another network")
    misses: list[tuple[float, Synthesis]] = []

    def meeting():
        for fc in grid:
            res, fallback, pm = placer.at(float(fc))
            if res is not None:
                yield res
            elif fallback is not None:
                misses.append((pm, fallback))

    res, practical = choose_automatic(meeting())
    if res is not None:
        return finish(res, [f"crossover chosen automatically: highest of {len(grid)} tried in "
                            f"{numfmt.eng(grid[-1], 'Hz')} to {numfmt.eng(grid[0], 'Hz')} meeting the targets with parts in "
                            "the practical range" if practical else
                            "crossover chosen automatically: no crossover meets the targets with "
                            "parts in the practical range; the highest meeting them is used"])
    closest = ""
    if misses:
        _, near = misses[closest_candidate([m[0] for m in misses])]
        closest = (f" (closest: at {numfmt.eng(near.crossover_hz, 'Hz')}, "
                   f"{miss_text(placer.verify(near.network, near.crossover_hz))})")
    raise DesignError(
        f"no crossover in {numfmt.eng(grid[-1], 'Hz')} to {numfmt.eng(grid[0], 'Hz')} meets phase margin >= "
        f"{targets.phase_margin_deg:g}° and gain margin >= {targets.gain_margin_db:g} dB "
        f"({describe(crossings)} counted) with a {kind} network{closest}")
