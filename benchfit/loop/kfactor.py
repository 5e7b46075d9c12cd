"""Closed-form K-factor placement of a network's poles and zeros, and the plant slopes
the 1/beta crossing method reads.

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
"""

from __future__ import annotations

import math

import numpy as np

from benchfit import numfmt
from benchfit.errors import DesignError
from benchfit.loop.loopgain import LoopPlant
from benchfit.loop.networks import Network, check_kind

#: Boost (degrees) each network can give: (minimum used, maximum allowed).
BOOST_LIMITS = {"type1": (0.0, 0.0), "pi": (5.0, 88.0), "type2": (5.0, 88.0), "type3": (5.0, 176.0)}
#: Slope of |C| in the network's boost region, dB/decade.
NETWORK_SLOPE_DB = {"type1": -20.0, "pi": 0.0, "type2": 0.0, "type3": 20.0}


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
