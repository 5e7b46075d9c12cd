"""Closed-loop responses of an op-amp stage from its Aol and its network.

With A = Aol · (Ro + ZL)/ZL the op-amp's internal gain, T = Aol · compensator
and the passive responses of :meth:`benchfit.loop.stage_networks.StageNetwork.at`:

* closed loop   G = k_x · A · (p − h_in)/(1 + T) + k_in   (p = 1 non-inverting, 0 inverting)
* output impedance at the load node (Blackman's formula, T_sc the return
  ratio with the load node shorted)  Z = Z_ol · (1 + T_sc)/(1 + T);
  T_sc = 0 unless part of the feedback comes from the op-amp's own pin
  (isolation network), so Z = Z_ol/(1 + T) for the others.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from benchfit.loop.rational import VALUES, Algebra
from benchfit.loop.stage_networks import StageNetwork


def closed_loop_values(net: StageNetwork, aol: np.ndarray, freq_hz: np.ndarray) -> dict[str, Any]:
    """Loop gain, closed-loop gain and closed-loop output impedance at ``freq_hz``.

    Parameters
    ----------
    net
        The stage network (with its load).
    aol
        The measured or modelled Aol at ``freq_hz`` (complex).
    freq_hz
        Frequencies, Hz.

    Returns
    -------
    dict
        ``loop`` (T), ``gain`` (V_load/V_in), ``z_open`` (Z_ol, ohm) and
        ``z_closed`` (ohm); impedances are 0 when no output resistance is known.
    """
    f = np.asarray(freq_hz, dtype=float)
    aol = np.asarray(aol, dtype=complex)
    alg = Algebra(VALUES, s=2j * np.pi * f)
    a = aol / net.aol_divider(alg).value()
    t = aol * net.response(f)
    p = 1.0 if net.stage == "noninverting" else 0.0
    g = net.at(f, "k_x") * a * (p - net.at(f, "h_in")) / (1.0 + t) + net.at(f, "k_in")
    z_ol = net.at(f, "z_ol")
    t_sc = a * net.at(f, "h_sc") if net.kind == "isolation" else 0.0
    return {"loop": t, "gain": g, "z_open": z_ol, "z_closed": z_ol * (1.0 + t_sc) / (1.0 + t)}
