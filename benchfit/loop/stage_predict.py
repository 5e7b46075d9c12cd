"""Predictions for an op-amp stage: closed loop, small-signal step, output impedance, load step.

The frequency curves come from :func:`benchfit.loop.stage_response.closed_loop_values`
(the stage's exact closed loop G = k_x·A·(p − h_in)/(1 + T) + k_in and
Z = Z_ol·(1 + T_sc)/(1 + T)).  The time responses need a model of Aol.  They
are simulated from the block diagram in state space, every block a small
well-scaled realisation (:func:`benchfit.loop.timeresponse.state_space`):
the op-amp's internal gain A = Aol·(Ro + ZL)/ZL, and the passive responses
h_x, h_in, k_x, k_in, Z_ol and h_z (V- per ampere into the load node) as
pole/zero models from the node equations.  Then

    V_x = A/(1 + A·h_x) · ((p − h_in)·V_in − h_z·I_load)
    V_load = k_x·V_x + k_in·V_in + Z_ol·I_load

and a step is sampled exactly (zero-order hold of a step input is exact).
A delay in the Aol model is left out of the time responses (warned).  The
curves are scored with the converter's step measures
(:func:`benchfit.loop.timeresponse.step_metrics`) and returned as its
:class:`~benchfit.loop.timeresponse.StepResponse`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from scipy.linalg import expm, matrix_balance

from benchfit.errors import InputError
from benchfit.fitting.model import PlantModel
from benchfit.loop.loopsim import state_space
from benchfit.loop.nodal import trim
from benchfit.loop.rational import POLY, VALUES, Algebra
from benchfit.loop.stage_networks import StageNetwork
from benchfit.loop.stage_response import closed_loop_values
from benchfit.loop.stepresponse import StepResponse, step_metrics
from benchfit.numfmt import db, eng, sig
from benchfit.provenance import Provenance

#: Time samples of a predicted step.
STEP_POINTS = 800

_CASES = {"h_x": ({"x": 1.0}, "n", None), "h_in": ({"i": 1.0}, "n", None),
          "k_x": ({"x": 1.0}, "l", None), "k_in": ({"i": 1.0}, "l", None),
          "z_ol": ({}, "l", "l"), "h_z": ({}, "n", "l")}


def passive_model(net: StageNetwork, what: str) -> PlantModel:
    """Pole/zero model of one passive response of the stage (see :data:`_CASES`)."""
    drive, want, inject = _CASES[what]
    if inject and net.kind != "isolation" and net.load.ro_ohm <= 0:
        return PlantModel(zeros=np.array([], complex), poles=np.array([], complex), k=0.0)
    w0 = net._w0()
    n, d = net._solve(Algebra(POLY, w0=w0), None, drive, want, inject=inject)
    n, d = trim(n), trim(d)
    if not np.any(n):
        return PlantModel(zeros=np.array([], complex), poles=np.array([], complex), k=0.0)
    z, p = np.roots(n) * w0, np.roots(d) * w0
    # the gain from one exact value (VALUES backend) at s = j·w0
    s_ref = np.array([1j * w0])
    nv, dv = net._solve(Algebra(VALUES, s=s_ref), None, drive, want, inject=inject)
    val = complex(np.ravel(np.asarray(nv / dv) * np.ones(1))[0])
    unit = np.prod(s_ref[0] - z) / np.prod(s_ref[0] - p)
    return PlantModel(zeros=z, poles=p, k=float((val / unit).real))


class _Lti:
    """A SISO state-space block with series, parallel and negative-feedback connections."""

    def __init__(self, a, b, c, d) -> None:
        a = np.asarray(a, dtype=float)
        self.a = a if a.size else np.zeros((0, 0))
        n = self.a.shape[0]
        self.b = np.asarray(b, dtype=float).reshape(n, 1)
        self.c = np.asarray(c, dtype=float).reshape(1, n)
        self.d = float(np.asarray(d, dtype=float).reshape(-1)[0]) if np.size(d) else 0.0

    @classmethod
    def of(cls, m: PlantModel) -> _Lti:
        if m.k == 0.0:
            return cls.gain(0.0)
        a, b, c, d = state_space(m)
        return cls(a, b, c, d)

    @classmethod
    def gain(cls, g: float) -> _Lti:
        return cls(np.zeros((0, 0)), np.zeros((0, 1)), np.zeros((1, 0)), g)

    def series(self, o: _Lti) -> _Lti:  # o after self
        n1, n2 = self.a.shape[0], o.a.shape[0]
        a = np.block([[self.a, np.zeros((n1, n2))], [o.b @ self.c, o.a]])
        return _Lti(a, np.vstack([self.b, o.b * self.d]), np.hstack([o.d * self.c, o.c]),
                    o.d * self.d)

    def parallel(self, o: _Lti, sign: float = 1.0) -> _Lti:
        n1, n2 = self.a.shape[0], o.a.shape[0]
        a = np.block([[self.a, np.zeros((n1, n2))], [np.zeros((n2, n1)), o.a]])
        return _Lti(a, np.vstack([self.b, o.b]), np.hstack([self.c, sign * o.c]),
                    self.d + sign * o.d)

    def feedback(self, h: _Lti) -> _Lti:
        """self/(1 + self·h); self must have no feed-through (an op-amp's gain does not)."""
        if abs(self.d) > 0:
            raise InputError("the op-amp model has a direct feed-through; a time response needs "
                             "a strictly proper Aol (more poles than zeros)")
        n2 = h.a.shape[0]
        a = np.block([[self.a - self.b @ (h.d * self.c), -self.b @ h.c], [h.b @ self.c, h.a]])
        return _Lti(a, np.vstack([self.b, np.zeros((n2, 1))]), np.hstack([self.c, np.zeros((1, n2))]),
                    0.0)

    def step(self, t: np.ndarray, size: float) -> np.ndarray:
        """Exact samples of the response to a step of ``size`` at t = 0 (``t`` uniform from 0)."""
        n = self.a.shape[0]
        out = np.empty(t.size)
        if n == 0:
            out[:] = self.d * size
            return out
        h = float(t[1] - t[0])
        m = np.zeros((n + 1, n + 1))
        m[:n, :n] = self.a * h
        m[:n, n:] = self.b * h
        # a high-gain op-amp model gives entries spanning tens of decades: balance first
        # (expm(M) = T·expm(T⁻¹MT)·T⁻¹, T diagonal), or Φ's rounding makes a stable loop blow up
        bal, tr = matrix_balance(m, permute=False)
        d = np.diag(tr)
        e = (expm(bal) * d[None, :] ** -1) * d[:, None]  # [[Φ, Γ], [0, 1]]: x(k+1) = Φ x(k) + Γ u
        phi, gam = e[:n, :n], e[:n, n:] * size
        x = np.zeros((n, 1))
        for i in range(t.size):
            out[i] = float((self.c @ x)[0, 0]) + self.d * size
            x = phi @ x + gam
        return out


def closed_loop_blocks(net: StageNetwork, aol: PlantModel) -> tuple[_Lti, _Lti]:
    """(V_load/V_in, V_load/I_load) as state-space systems."""
    div = net.load
    a_int = aol
    if div.ro_ohm > 0 and div.c_f is not None:  # A = Aol·(1 + s(Ro+ESR)CL)/(1 + s·ESR·CL)
        z = [-1.0 / ((div.ro_ohm + div.esr_ohm) * div.c_f)]
        p = [-1.0 / (div.esr_ohm * div.c_f)] if div.esr_ohm > 0 else []
        k = (div.ro_ohm + div.esr_ohm) / div.esr_ohm if div.esr_ohm > 0 else (div.ro_ohm * div.c_f)
        a_int = aol.cascade(PlantModel(zeros=np.array(z, complex), poles=np.array(p, complex), k=k))
    a_int = PlantModel(zeros=a_int.zeros, poles=a_int.poles, k=a_int.k)  # the rational part
    blk = {w: _Lti.of(passive_model(net, w)) for w in _CASES}
    loop = _Lti.of(a_int).feedback(blk["h_x"])
    p = 1.0 if net.stage == "noninverting" else 0.0
    fwd = _Lti.gain(p).parallel(blk["h_in"], sign=-1.0)
    gain = fwd.series(loop).series(blk["k_x"]).parallel(blk["k_in"])
    z = blk["z_ol"].parallel(blk["h_z"].series(loop).series(blk["k_x"]), sign=-1.0)
    return gain, z


@dataclass(frozen=True, eq=False)
class StagePrediction:
    """Closed loop and output impedance curves, reference step and load step of a stage."""

    freq_hz: np.ndarray
    closed: np.ndarray
    z_closed: np.ndarray
    step: StepResponse | None
    load: StepResponse | None
    warnings: tuple[str, ...] = ()
    provenance: Provenance = field(default_factory=lambda: Provenance(step="stage_predict"))

    def bandwidth_hz(self) -> float:
        """First frequency where |G| is 3 dB below its low-frequency value."""
        mag = np.abs(self.closed)
        idx = np.flatnonzero(mag < mag[0] / math.sqrt(2))
        return float(self.freq_hz[idx[0]]) if idx.size else math.nan

    def to_dict(self) -> dict[str, Any]:
        from benchfit.fileio import encode_complex

        return {"kind": "stage_prediction", "freq_hz": self.freq_hz.tolist(),
                "closed": encode_complex(self.closed), "z_closed": encode_complex(self.z_closed),
                "bandwidth_hz": self.bandwidth_hz(),
                "step": None if self.step is None else self.step.to_dict(),
                "load_step": None if self.load is None else self.load.to_dict(),
                "warnings": list(self.warnings), "provenance": self.provenance.to_dict()}

    def report(self) -> str:
        lines = [f"closed-loop bandwidth {eng(self.bandwidth_hz(), 'Hz')} (-3 dB from "
                 f"{sig(abs(self.closed[0]))} V/V), peaking "
                 f"{db(20 * math.log10(np.max(np.abs(self.closed)) / abs(self.closed[0])))}"]
        if self.step is not None:
            s = self.step
            lines.append(f"small-signal step {eng(s.step_size, 'V')}: overshoot {sig(s.overshoot_pct)} %, "
                         f"rise {eng(s.rise_time_s, 's')}, settling ({s.settle_band * 100:g} %) "
                         f"{eng(s.settling_time_s, 's')}")
        if np.any(self.z_closed):
            j = int(np.argmax(np.abs(self.z_closed)))
            lines.append(f"output impedance peak {eng(abs(self.z_closed[j]), 'ohm')} at "
                         f"{eng(self.freq_hz[j], 'Hz')}")
        if self.load is not None:
            ld = self.load
            lines.append(f"load step {eng(ld.step_size, 'A')} into the capacitor: peak deviation "
                         f"{eng(ld.peak_value, 'V')} at {eng(ld.peak_time_s, 's')}")
        lines += [f"warning: {w}" for w in self.warnings]
        return "\n".join(lines)


def _step_result(kind: str, t, y, final, size, band, prov) -> StepResponse:
    if kind == "reference":
        met = step_metrics(t, y, final, band=band)
        return StepResponse(kind="reference", time_s=t, value=y, step_size=size, final_value=final,
                            peak_value=met["peak_value"], peak_time_s=met["peak_time_s"],
                            overshoot_pct=met["overshoot_pct"], undershoot_pct=met["undershoot_pct"],
                            rise_time_s=met["rise_time_s"], settling_time_s=met["settling_time_s"],
                            settle_band=band, delay_s=0.0, provenance=prov)
    j = int(np.argmax(np.abs(y - final)))
    dev = y - final
    out = np.flatnonzero(np.abs(dev) > band * abs(dev[j]))
    settle = float(t[out[-1]]) if out.size else float(t[0])
    return StepResponse(kind="load", time_s=t, value=y, step_size=size, final_value=final,
                        peak_value=float(y[j]), peak_time_s=float(t[j]), overshoot_pct=math.nan,
                        undershoot_pct=math.nan, rise_time_s=math.nan, settling_time_s=settle,
                        settle_band=band, delay_s=0.0, provenance=prov)


def predict_stage(net: StageNetwork, aol: PlantModel, *, freq_hz: np.ndarray, crossover_hz: float,
                  step_v: float = 0.01, load_step_a: float | None = 0.01,
                  t_end_s: float | None = None, settle_band: float = 0.02) -> StagePrediction:
    """Frequency curves and step responses of the stage.

    Parameters
    ----------
    net, aol
        The network and the Aol model.
    freq_hz
        Frequencies of the curves.
    crossover_hz
        The loop's crossover (sets the default time span, 10 periods of it,
        widened to the slowest closed-loop settling).
    step_v
        Small-signal input step, V.
    load_step_a
        Load-current step into the capacitor, A (None: no load step; needs
        the output resistance).
    """
    if not isinstance(aol, PlantModel):
        raise InputError("the stage's time responses need a model of Aol (fit the sweep)")
    f = np.asarray(freq_hz, dtype=float)
    v = closed_loop_values(net, aol.response(f), f)
    warnings = []
    if not (math.isfinite(crossover_hz) and crossover_hz > 0):
        raise InputError("no crossover: the stage's time responses cannot be scaled")
    t_end = t_end_s or 10.0 / crossover_hz
    t = np.linspace(0.0, t_end, STEP_POINTS + 1)
    g_dc = float(np.real(v["gain"][0]))
    prov = Provenance(step="stage_step", settings={"network": net.to_dict(), "step_v": step_v,
                                                   "method": "state space, exact step samples"})
    if aol.delay_s:
        warnings.append(f"the Aol model's delay ({aol.delay_s:.3g} s) is left out of the time "
                        "responses (the margins include it)")
    g_sys, z_sys = closed_loop_blocks(net, aol)
    y = g_sys.step(t, step_v)
    step = _step_result("reference", t, y, g_dc * step_v, step_v, settle_band, prov)
    if abs(y[-1] - g_dc * step_v) > settle_band * abs(g_dc * step_v):
        warnings.append("the small-signal step has not settled in 10 crossover periods (a slow "
                        "closed-loop pole: a lag corner or a doublet)")
    load = None
    if load_step_a is not None:
        if net.load.ro_ohm <= 0 and net.kind != "isolation":
            warnings.append("no load step: it needs the op-amp's output resistance "
                            "(--output-resistance)")
        else:
            yl = z_sys.step(t, -load_step_a)
            z0 = float(np.real(closed_loop_values(net, aol.response(f[:1]), f[:1])["z_closed"][0]))
            load = _step_result("load", t, yl, -load_step_a * z0, load_step_a, settle_band,
                                prov.derive("stage_load_step", {"load_step_a": load_step_a}))
    return StagePrediction(freq_hz=f, closed=v["gain"], z_closed=v["z_closed"], step=step,
                           load=load, warnings=tuple(warnings), provenance=prov)
