"""The frequency grid a Monte Carlo evaluates every draw on: the plant's own features included.

A fixed log grid placed around the network's corners misses what the plant
brings (a lightly damped resonance between two grid points reads several dB
low) and interpolates the crossings, so even draws equal to the nominal loop
would disagree with the nominal margins.  :func:`feature_grid` therefore
holds

* a log grid (:data:`POINTS_PER_DECADE`) over the band that holds the
  network's corners, the plant's poles and zeros and the nominal crossings,
  three decades beyond them (to the op-amp's GBW × 10);
* around every lightly damped pole or zero pair of the plant and of the
  network (Q above :data:`CLUSTER_MIN_Q`) a cluster of :data:`CLUSTER_POINTS`
  spanning ±3 half-power bandwidths of the resonance (±(3/Q)/ln 10 decades,
  at least ±0.01 decade); well-damped corners change slowly enough for the
  log grid;
* every crossing of the nominal loop (gain and phase, as the dense nominal
  analysis finds them), exactly, with a cluster of :data:`CLUSTER_POINTS`
  over ±:data:`CROSSING_SPAN_DECADES` around it,

so a draw with zero tolerance reproduces the nominal margins exactly (the
crossings are grid points) and a drawn crossing that moves a little is
still interpolated across a short interval.  A measured plant is evaluated
on its own frequencies (its nominal margins come from the same points).
"""

from __future__ import annotations

import math

import numpy as np

from benchfit.loop.loopgain import Loop, LoopPlant
from benchfit.loop.networks import Network
from benchfit.loop.opamp import OpAmp

POINTS_PER_DECADE = 50
CLUSTER_POINTS = 41
CLUSTER_MIN_Q = 1.0
CROSSING_SPAN_DECADES = 0.05
_MIN_HALF_WIDTH_DECADES = 0.01


def _singularity_clusters(roots: np.ndarray) -> list[np.ndarray]:
    """log10 f clusters around each lightly damped root (rad/s), as wide as its resonance."""
    out = []
    for r in np.asarray(roots, dtype=complex):
        w = abs(r)
        if w == 0 or not math.isfinite(w):
            continue
        zeta = abs(r.real) / w                     # 1/(2Q) for a complex pair, 1 for a real root
        if zeta >= 1.0 / (2.0 * CLUSTER_MIN_Q):
            continue
        half = max(3.0 * 2.0 * zeta / math.log(10.0), _MIN_HALF_WIDTH_DECADES)
        half = min(half, 0.5)
        out.append(math.log10(w / (2 * math.pi)) + np.linspace(-half, half, CLUSTER_POINTS))
    return out


def feature_grid(lp: LoopPlant, network: Network, opamp: OpAmp | None,
                 nominal_crossings_hz=None) -> np.ndarray:
    """The Monte Carlo grid of one plant corner (see the module notes).

    Parameters
    ----------
    lp
        The plant corner.
    network, opamp
        The nominal network and op-amp.
    nominal_crossings_hz
        Frequencies of the nominal loop's crossings; computed from the dense
        nominal analysis when None.

    Returns
    -------
    ndarray
        Increasing frequencies, Hz.
    """
    if lp.is_data:
        return np.asarray(lp.plant.freq_hz, dtype=float)
    comp = network.model(opamp)
    plant = lp.plant
    if nominal_crossings_hz is None:
        m = Loop(lp, network, opamp).margins()
        nominal_crossings_hz = [c["freq_hz"] for c in m.crossings]
    fx = np.asarray([v for v in nominal_crossings_hz if v > 0 and math.isfinite(v)], dtype=float)
    roots = np.concatenate([plant.poles, plant.zeros, comp.poles, comp.zeros])
    sing = np.abs(roots[roots != 0]) / (2 * math.pi)
    c = network.corners_hz()
    marks = np.concatenate([sing, fx, c["zeros_hz"], c["poles_hz"], [network.integrator_hz()]])
    marks = marks[np.isfinite(marks) & (marks > 0)]
    lo, hi = marks.min() / 1e3, marks.max() * 1e3
    if opamp is not None:
        hi = max(hi, opamp.gbw_hz * 10)
    if plant.delay_s > 0:    # above everything else a delay only spins the phase
        hi = min(hi, max(30.0 / plant.delay_s, marks.max() * 10))
    xl, xh = math.log10(lo), math.log10(hi)
    parts = [np.linspace(xl, xh, int(math.ceil((xh - xl) * POINTS_PER_DECADE)) + 1)]
    parts += _singularity_clusters(roots)
    parts += [math.log10(v) + np.linspace(-CROSSING_SPAN_DECADES, CROSSING_SPAN_DECADES,
                                          CLUSTER_POINTS) for v in fx]
    x = np.unique(np.concatenate(parts))
    x = x[(x >= xl) & (x <= xh)]
    f = 10 ** x
    # the nominal crossings themselves, exactly (10**log10 may move them by an ulp)
    f = np.unique(np.concatenate([f[~_near(f, fx)], fx]))
    return f


def _near(f: np.ndarray, fx: np.ndarray) -> np.ndarray:
    """Grid points within 1e-9 (relative) of a crossing: replaced by the crossing itself."""
    if fx.size == 0:
        return np.zeros(f.shape, dtype=bool)
    fxs = np.sort(fx)
    j = np.clip(np.searchsorted(fxs, f), 0, fxs.size - 1)
    jm = np.clip(j - 1, 0, fxs.size - 1)
    d = np.minimum(np.abs(f / fxs[j] - 1), np.abs(f / fxs[jm] - 1))
    return d < 1e-9
