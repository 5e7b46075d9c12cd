"""Placing a compensation network's poles and zeros: K factor and 1/beta crossing.

Sign conventions (see :mod:`benchfit.loop.networks`): the compensator C is
the inverting stage's gain with the inversion folded into the loop sign, so
``T = P·H·C`` (plant · sensing · compensator) is the return ratio and the
phase margin is ``PM = 180° + ∠T(fc)``.

**K-factor method** (Venable 1983).  The ideal networks are an integrator
ωi/s times K-factor pairs:

* type2: ``C = ωi/s · (1 + s/ωz)/(1 + s/ωp)``, ωz = ωc/K, ωp = K·ωc;
  phase at ωc is −90° + boost with boost = 2·atan(K) − 90°, so
  ``K = tan(boost/2 + 45°)``;
* type3: two coincident pairs at ωc/√K and √K·ωc;
  boost = 4·atan(√K) − 180°, so ``K = tan²(boost/4 + 45°)``;
* pi: one zero at ωc/tan(boost) (its boost is atan(ωc/ωz));
* type1: no boost; the phase margin is whatever the plant leaves.

With φ = ∠(P·H)(fc), ``∠T(fc) = φ − 90° + boost`` so the boost needed is::

    boost = PM_target − 90° − φ          (wrapped into (−180°, 180°])

and the integrator gain ωi is set so |T(fc)| = 1 (type2/type3: |C(jωc)| =
K·ωi/ωc).  The input resistor R1 is the designer's free choice of impedance
level; every other part follows from it.

**1/beta crossing method.**  Read the compensator as a 1/beta curve 1/|C|
against the plant gain |P·H|; the loop crosses over where they meet.  The
rate of closure there is ``ROC = slope(1/|C|) − slope(|P·H|)`` in dB/decade,
with the network's slope in its boost region (type1 −20, type2/pi 0,
type3 +20 dB/decade for |C|).  The method chooses the crossover where the
rate of closure is 20 dB/decade (the classic stable crossing; common
practice, no source), then places the corners around it with the boost the
phase-margin target needs, exactly as above.  The two methods thus differ in
how the crossover is chosen.

**Finite op-amp and several plants (corners).**  The closed-form placement
is exact for one plant and an ideal op-amp.  Otherwise the placement is
repeated with a larger design phase margin (and the gain corrected so
|T(fc)| = 1 on the first corner with the real op-amp) until the worst corner
meets the targets.  With ``crossover_hz=None`` the highest crossover in the
plants' common band that meets every target is chosen.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from benchfit import numfmt
from benchfit.errors import DesignError, InputError
from benchfit.loop.choices import METHODS
from benchfit.loop.closure import rate_of_closure_db
from benchfit.loop.loopgain import LoopPlant
from benchfit.loop.networks import Network, check_kind
from benchfit.loop.opamp import OpAmp

#: Boost (degrees) each network can give: (minimum used, maximum allowed).
BOOST_LIMITS = {"type1": (0.0, 0.0), "pi": (5.0, 88.0), "type2": (5.0, 88.0), "type3": (5.0, 176.0)}
#: Slope of |C| in the network's boost region, dB/decade.
NETWORK_SLOPE_DB = {"type1": -20.0, "pi": 0.0, "type2": 0.0, "type3": 20.0}
#: Numerical slack when judging "target met" (degrees / dB).
TOL = 0.01
# Extra design phase margins tried, in degrees, when one closed-form placement is not enough.
_EXTRA_PM = (0.0, 0.25, 0.5, 1.0, 2.0, 3.0, 4.0, 6.0, 8.0, 10.0, 13.0, 16.0, 20.0, 25.0, 30.0,
             40.0, 50.0, 65.0, 80.0)


@dataclass(frozen=True)
class Targets:
    """What the loop must achieve.

    Parameters
    ----------
    crossover_hz
        Requested crossover in Hz, or None to let synthesis pick the highest
        one that meets the margins.
    phase_margin_deg
        Minimum phase margin, degrees.
    gain_margin_db
        Minimum gain margin, dB.
    """

    crossover_hz: float | None = None
    phase_margin_deg: float = 60.0
    gain_margin_db: float = 10.0

    def __post_init__(self) -> None:
        for name in ("phase_margin_deg", "gain_margin_db"):
            object.__setattr__(self, name, float(getattr(self, name)))
        if self.crossover_hz is not None:
            object.__setattr__(self, "crossover_hz", float(self.crossover_hz))
        if self.crossover_hz is not None and not (math.isfinite(self.crossover_hz)
                                                   and self.crossover_hz > 0):
            raise InputError(f"crossover {self.crossover_hz!r}; expected a frequency > 0 Hz or auto",
                             source="--crossover")
        if not (0 < self.phase_margin_deg < 180):
            raise InputError(f"phase margin {self.phase_margin_deg!r}; expected 0..180 degrees",
                             source="--phase-margin")
        if not (math.isfinite(self.gain_margin_db) and self.gain_margin_db >= 0):
            raise InputError(f"gain margin {self.gain_margin_db!r}; expected >= 0 dB",
                             source="--gain-margin")

    def met(self, pm_deg: float, gm_db: float) -> bool:
        return bool(np.isfinite(pm_deg) and pm_deg >= self.phase_margin_deg - TOL
                    and not (gm_db < self.gain_margin_db - TOL))

    def to_dict(self) -> dict[str, Any]:
        return {"crossover_hz": self.crossover_hz, "phase_margin_deg": self.phase_margin_deg,
                "gain_margin_db": self.gain_margin_db}

    @classmethod
    def from_dict(cls, d: dict[str, Any] | None) -> Targets:
        d = d or {}
        fc = d.get("crossover_hz")
        return cls(crossover_hz=None if fc in (None, "auto") else float(fc),
                   phase_margin_deg=float(d.get("phase_margin_deg", 60.0)),
                   gain_margin_db=float(d.get("gain_margin_db", 10.0)))


@dataclass(frozen=True)
class Synthesis:
    """Where the network's corners went and why.

    Attributes
    ----------
    network
        The network with ideal (unsnapped) part values.
    method
        'k-factor' or 'crossing'.
    crossover_hz
        Crossover the network was placed for.
    plant_phase_deg
        ∠(plant·sensing) at the crossover on the first corner, in (−360, 0].
    boost_deg, k
        Phase boost and K factor used (k = 1 for type1; for pi, ωc/ωz).
    design_pm_deg
        Phase margin the placement aimed at (> target when extra was needed
        for a finite op-amp or several corners).
    rate_of_closure_db
        1/beta rate of closure at the crossover, dB/decade (first corner, the placed
        network's actual slope: :func:`benchfit.loop.closure.rate_of_closure_db`).
    notes
        Plain-language remarks (boost clamped, target out of reach...).
    """

    network: Network
    method: str
    crossover_hz: float
    plant_phase_deg: float
    boost_deg: float
    k: float
    design_pm_deg: float
    rate_of_closure_db: float
    notes: tuple[str, ...] = ()

    def to_dict(self) -> dict[str, Any]:
        return {"network": self.network.to_dict(), "method": self.method,
                "crossover_hz": self.crossover_hz, "plant_phase_deg": self.plant_phase_deg,
                "boost_deg": self.boost_deg, "k": self.k, "design_pm_deg": self.design_pm_deg,
                "rate_of_closure_db": self.rate_of_closure_db, "notes": list(self.notes)}


# ----- closed-form placement ----------------------------------------------------------------
def wrap_deg(x: float) -> float:
    """Angle wrapped into (−180, 180]."""
    return 180.0 - ((180.0 - x) % 360.0)


def boost_needed(plant_at_fc: complex, pm_deg: float) -> float:
    """Boost (degrees) a network must add at fc: PM − 90° − ∠(P·H)(fc), wrapped."""
    return wrap_deg(pm_deg - 90.0 - math.degrees(np.angle(plant_at_fc)))


def k_from_boost(kind: str, boost_deg: float) -> float:
    """Venable's K for a boost: type2 tan(b/2 + 45°), type3 tan²(b/4 + 45°); pi ωc/ωz."""
    b = math.radians(boost_deg)
    if kind == "type2":
        return math.tan(b / 2 + math.pi / 4)
    if kind == "type3":
        return math.tan(b / 4 + math.pi / 4) ** 2
    if kind == "pi":
        return math.tan(b)
    return 1.0


def place(kind: str, plant_at_fc: complex, fc_hz: float, pm_deg: float, r_in: float,
          gain_scale: float = 1.0) -> tuple[Network, float, float, list[str]]:
    """Closed-form K-factor placement for one plant value and an ideal op-amp.

    Parameters
    ----------
    kind
        Network kind.
    plant_at_fc
        (plant · sensing)(j2π fc), complex.
    fc_hz
        Crossover, Hz.
    pm_deg
        Phase margin to place for, degrees.
    r_in
        Input resistor R1, ohm.
    gain_scale
        Multiplies the compensator gain (used to correct for a finite op-amp).

    Returns
    -------
    network, boost_deg, k, notes
    """
    kind = check_kind(kind)
    notes: list[str] = []
    mag = abs(plant_at_fc)
    if not (np.isfinite(mag) and mag > 0):
        raise DesignError(f"plant gain at {numfmt.eng(fc_hz, 'Hz')} is {mag}; cannot place a crossover there")
    lo, hi = BOOST_LIMITS[kind]
    boost = boost_needed(plant_at_fc, pm_deg)
    if kind == "type1":
        notes.append(f"type1 gives no boost: phase margin about {numfmt.deg(pm_deg - boost)} "
                     f"at {numfmt.eng(fc_hz, 'Hz')}")
        boost = 0.0
    elif boost > hi:
        raise DesignError(f"{kind} cannot give the {numfmt.deg(boost)} of boost needed at {numfmt.eng(fc_hz, 'Hz')} "
                          f"(at most {hi:.0f}°); use a lower crossover, a lower phase margin"
                          + (" or type3" if kind != "type3" else ""))
    elif boost < lo:
        notes.append(f"plant phase needs only {numfmt.deg(boost)} of boost at {numfmt.eng(fc_hz, 'Hz')}; using "
                     f"{lo:.0f}° (phase margin will exceed the target)")
        boost = lo
    k = k_from_boost(kind, boost)
    wc = 2 * math.pi * fc_hz
    g = gain_scale / mag  # |C(jωc)| wanted
    r1 = float(r_in)
    if kind == "type1":
        parts = {"R1": r1, "C1": 1.0 / (r1 * g * wc)}
    elif kind == "pi":
        wz = wc / k
        wi = g * wc / math.sqrt(1.0 + k * k)
        c1 = 1.0 / (r1 * wi)
        parts = {"R1": r1, "R2": 1.0 / (wz * c1), "C1": c1}
    elif kind == "type2":
        wi = g * wc / k
        ctot = 1.0 / (r1 * wi)
        c2 = ctot / (k * k)            # ωp/ωz = (C1 + C2)/C2 = K²
        c1 = ctot - c2
        parts = {"R1": r1, "R2": 1.0 / ((wc / k) * c1), "C1": c1, "C2": c2}
    else:  # type3
        wi = g * wc / k
        ctot = 1.0 / (r1 * wi)
        sk = math.sqrt(k)
        wz, wp = wc / sk, wc * sk
        c2 = ctot / k                  # ωp1/ωz1 = (C1 + C2)/C2 = K
        c1 = ctot - c2
        c3 = (1.0 / wz - 1.0 / wp) / r1  # (R1 + R3)·C3 = 1/ωz, R3·C3 = 1/ωp
        parts = {"R1": r1, "R2": 1.0 / (wz * c1), "R3": 1.0 / (wp * c3),
                 "C1": c1, "C2": c2, "C3": c3}
    return Network(kind, parts), boost, k, notes


# ----- plant slope and the 1/beta rule ------------------------------------------------------
def plant_slope_db(lp: LoopPlant, f_hz: np.ndarray) -> np.ndarray:
    """d(20·log10|P·H|)/d(log10 f) in dB/decade (central difference, ±1/40 decade)."""
    f = np.asarray(f_hz, dtype=float)
    step = 10 ** (1 / 40)
    up = np.abs(lp.response(f * step))
    dn = np.abs(lp.response(f / step))
    return 20 * np.log10(up / dn) / (2 / 40)


def rate_of_closure(kind: str, lp: LoopPlant, f_hz: np.ndarray) -> np.ndarray:
    """Asymptotic 1/beta rate of closure at ``f_hz``: −slope(|C|) − slope(|P·H|), dB/decade.

    The network's slope is its boost-region asymptote (:data:`NETWORK_SLOPE_DB`): this
    chooses candidate crossovers before any network is placed.  A placed network's figure
    comes from :func:`benchfit.loop.closure.rate_of_closure_db` on its actual response.
    """
    return -NETWORK_SLOPE_DB[kind] - plant_slope_db(lp, f_hz)


# ----- search over design phase margin, crossover -------------------------------------------
def _margins_rows(freq_hz: np.ndarray, t: np.ndarray,
                  unstable: int = 0) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    from benchfit.loop.margins import margins_batch

    out = margins_batch(freq_hz, t, unstable_open_loop_poles=unstable)
    # an unstable closed loop meets nothing, whatever its main-crossover phase margin
    pm = np.where(out["stable"], np.asarray(out["pm_deg"], dtype=float), -np.inf)
    return pm, np.asarray(out["gm_db"], dtype=float), np.asarray(out["crossover_hz"], dtype=float)


class _Placer:
    """Placement at one crossover across corners with a possibly finite op-amp."""

    def __init__(self, kind: str, corners: Sequence[LoopPlant], targets: Targets, r_in: float,
                 opamp: OpAmp | None) -> None:
        self.kind, self.corners, self.targets = kind, list(corners), targets
        self.r_in, self.opamp = r_in, opamp

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

    def worst(self, nets: list[Network], fc: float) -> tuple[np.ndarray, np.ndarray]:
        """Worst PM and GM over corners for each candidate network.

        A candidate whose main crossover on the first corner is not at ``fc``
        (another crossing took over) counts as failing: PM −inf.
        """
        pm_w = np.full(len(nets), np.inf)
        gm_w = np.full(len(nets), np.inf)
        hi = fc * 1e3 if self.opamp is None else max(fc * 1e3, self.opamp.gbw_hz * 10)
        for i, lp in enumerate(self.corners):
            g = lp.grid(fc / 1e3, hi)
            t = np.array([lp.response(g) * n.response(g, self.opamp) for n in nets])
            pm, gm, fx = _margins_rows(g, t, lp.unstable_poles)
            if i == 0:
                pm = np.where(np.abs(np.log(fx / fc)) < math.log(1.03), pm, -np.inf)
            pm_w = np.minimum(pm_w, np.where(np.isfinite(pm), pm, -np.inf))
            gm_w = np.minimum(gm_w, np.where(np.isnan(gm), -np.inf, gm))
        return pm_w, gm_w

    def at(self, fc: float) -> tuple[Synthesis | None, float, float, Synthesis | None]:
        """Best placement at ``fc``: (meeting synthesis or None, worst pm, worst gm, fallback)."""
        target = self.targets.phase_margin_deg
        cands = []
        for extra in _EXTRA_PM:
            try:
                cands.append((target + extra, *self.network(fc, target + extra)))
            except DesignError:
                break  # more boost than the network can give from here on
        if not cands:
            return None, -np.inf, -np.inf, None
        if len(self.corners) == 1 and self.opamp is None:
            cands = cands[:1]  # closed form is exact: no search
        pm_w, gm_w = self.worst([c[1] for c in cands], fc)
        ok = [self.targets.met(p, g) for p, g in zip(pm_w, gm_w, strict=True)]
        if any(ok):
            i = ok.index(True)
            if i > 0:  # bisect between the last failing and first passing design PM
                lo, hi = cands[i - 1][0], cands[i][0]
                best = cands[i]
                for _ in range(6):
                    mid = 0.5 * (lo + hi)
                    c = (mid, *self.network(fc, mid))
                    p, g = self.worst([c[1]], fc)
                    if self.targets.met(p[0], g[0]):
                        hi, best = mid, c
                    else:
                        lo = mid
                cands[i] = best
                pm_w[i], gm_w[i] = (a[0] for a in self.worst([best[1]], fc))
            return self._result(fc, cands[i]), float(pm_w[i]), float(gm_w[i]), None
        j = int(np.argmax(pm_w))
        return None, float(pm_w[j]), float(gm_w[j]), self._result(fc, cands[j])

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
               candidates: int = 80) -> Synthesis:
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

    Returns
    -------
    Synthesis
        With ``notes`` saying when the targets could not be met at a given crossover.

    Raises
    ------
    DesignError
        When no crossover in the plants' common band meets the targets
        (automatic), the given crossover lies outside that band, or the
        network cannot give the boost needed (given crossover).
    """
    kind = check_kind(kind)
    if method not in METHODS:
        raise InputError(f"method {method!r} unknown; expected one of {', '.join(METHODS)}",
                         source="--method")
    if not (math.isfinite(r_in) and r_in > 0):
        raise InputError(f"input resistor {r_in!r}; expected a value > 0 ohm", source="--r-in")
    corners = [corners] if isinstance(corners, LoopPlant) else list(corners)
    if not corners:
        raise InputError("no plant given")
    placer = _Placer(kind, corners, targets, float(r_in), opamp)

    def finish(res: Synthesis, extra: list[str]) -> Synthesis:
        notes = list(res.notes) + extra
        roc = res.rate_of_closure_db
        if method == "crossing" and abs(roc - 20.0) > 10.0:
            notes.append(f"rate of closure at {numfmt.eng(res.crossover_hz, 'Hz')} is {roc:.0f} dB/decade, "
                         "not the 20 dB/decade the crossing method aims for")
        return Synthesis(**{**res.__dict__, "method": method, "notes": tuple(notes)})

    if targets.crossover_hz is not None:
        fc = float(targets.crossover_hz)
        check_crossover_in_band(fc, corners)
        res, pm, gm, fallback = placer.at(fc)
        if res is not None:
            return finish(res, [])
        if fallback is None:
            # not even the target phase margin can be placed: say why
            place(kind, complex(corners[0].response(np.array([fc]))[0]), fc,
                  targets.phase_margin_deg, r_in)
            raise DesignError(f"no {kind} placement at {numfmt.eng(fc, 'Hz')}")
        why = (f"worst phase margin {numfmt.deg(pm)}, worst gain margin {numfmt.db(gm)}" if np.isfinite(pm)
               else "the closed loop is unstable or crosses over elsewhere on some plant")
        return finish(fallback, [f"targets not met at {numfmt.eng(fc, 'Hz')}: {why}"])
    lo, hi = common_band(corners)
    if opamp is not None:
        hi = min(hi, opamp.gbw_hz)
    if not hi > lo * 1.01:
        raise DesignError(f"the plants' common band {numfmt.eng(lo, 'Hz')} to {numfmt.eng(hi, 'Hz')} is empty")
    # keep clear of the band edges: slopes and data near them are least trusted
    grid = np.logspace(np.log10(lo * 2), np.log10(hi / 2), candidates)[::-1]
    if method == "crossing":
        roc = rate_of_closure(kind, corners[0], grid)
        grid = grid[np.abs(roc - 20.0) <= 10.0]
        if grid.size == 0:
            raise DesignError(f"nowhere in {numfmt.eng(lo, 'Hz')} to {numfmt.eng(hi, 'Hz')} does a {kind} network meet the "
                              "plant with a 20 dB/decade rate of closure; try another network")
    best = (-np.inf, None)
    impractical = None  # highest crossover meeting the targets only with impractical parts
    for fc in grid:
        res, pm, gm, _ = placer.at(float(fc))
        if res is not None:
            if not res.network.practical_warnings():
                return finish(res, [f"crossover chosen automatically: highest of {len(grid)} "
                                    f"tried in {numfmt.eng(grid[-1], 'Hz')} to {numfmt.eng(grid[0], 'Hz')} meeting the "
                                    "targets with parts in the practical range"])
            impractical = impractical or res
        if pm > best[0]:
            best = (pm, fc)
    if impractical is not None:
        return finish(impractical, ["crossover chosen automatically: no crossover meets the "
                                    "targets with parts in the practical range; the highest "
                                    "meeting them is used"])
    raise DesignError(
        f"no crossover in {numfmt.eng(grid[-1], 'Hz')} to {numfmt.eng(grid[0], 'Hz')} meets phase margin >= "
        f"{targets.phase_margin_deg:g}° and gain margin >= {targets.gain_margin_db:g} dB with a "
        f"{kind} network" + ("" if best[1] is None else
                             f" (best worst-corner phase margin {numfmt.deg(best[0])} at {numfmt.eng(best[1], 'Hz')})"))
