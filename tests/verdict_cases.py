"""Loops with known truth for the verdict, margin and yield checks, and their references.

Our own scenarios (shared by tests/test_verdicts.py and benchmarks/verdicts.py):

* a raw loop sweep with two integrators, K(1+s/ω300)/(s²(1+s/ω10k)),
  crossing 0 dB near 1.5 kHz with about 70° of phase margin;
* a velocity servo: motor pole at 20 Hz, a Q = 15 mechanical resonance at
  1.5 kHz, 150 µs of delay (current loop and sampling);
* random loops with 0–2 integrators, a resonance of Q 5–30 and a delay.

The references are python-control (``control.stability_margins`` on a dense
frequency-response evaluation of the TRUE loop, every crossing, and the
closed-loop poles of the loop with its delay replaced by a Padé
approximant), never benchfit's own margins code.
"""

from __future__ import annotations

import math

import control
import numpy as np

from benchfit.fitting.model import PlantModel

TWO_PI = 2 * math.pi


def double_integrator_loop() -> PlantModel:
    """T = K(1+s/ω300)/(s²(1+s/ω10k)) with |T(j·2π·1.5 kHz)| = 1."""
    wz, wp = TWO_PI * 300, TWO_PI * 10e3
    shape = PlantModel(zeros=np.array([-wz]), poles=np.array([0.0, 0.0, -wp]), k=wp / wz)
    k = 1 / abs(shape.response(np.array([1500.0]))[0])
    return PlantModel(zeros=shape.zeros, poles=shape.poles, k=shape.k * k)


def noisy(T: np.ndarray, db: float, deg: float, seed: int) -> np.ndarray:
    """``T`` with Gaussian noise of ``db`` on the magnitude and ``deg`` on the phase."""
    rng = np.random.default_rng(seed)
    return T * 10 ** (rng.normal(0, db, T.size) / 20) * np.exp(1j * np.radians(rng.normal(0, deg,
                                                                                        T.size)))


def servo_plant(delay_s: float = 150e-6) -> PlantModel:
    """Velocity servo: gain 50, motor pole 20 Hz, Q 15 resonance at 1.5 kHz, a delay."""
    w0, q, wm = TWO_PI * 1.5e3, 15.0, TWO_PI * 20
    poles = np.concatenate([[-wm], np.roots([1, w0 / q, w0 ** 2])])
    return PlantModel(zeros=np.array([]), poles=poles, k=50 * wm * w0 ** 2, delay_s=delay_s)


def random_loops(count: int, seed: int) -> list[PlantModel]:
    """Loops with 0, 1 or 2 integrators (in turn), a resonance (Q 5-30) and a delay.

    Each crosses 0 dB near 1 kHz; the resonance sits 3-20x above it and its
    peak may rise above 0 dB (some loops are unstable, some conditionally
    so): the verdicts are whatever the truth says.
    """
    rng = np.random.default_rng(seed)
    out = []
    for i in range(count):
        n = i % 3
        fc = 1e3
        wr = TWO_PI * fc * rng.uniform(3, 20)
        q = rng.uniform(5, 30)
        res_p = np.roots([1, wr / q, wr ** 2])
        zeros, poles = [], list(res_p)
        if n == 0:
            poles.append(-TWO_PI * fc / rng.uniform(10, 40))
        elif n == 1:
            poles += [0.0, -TWO_PI * fc * rng.uniform(3, 10)]
        else:
            zeros.append(-TWO_PI * fc / rng.uniform(3, 6))
            poles += [0.0, 0.0, -TWO_PI * fc * rng.uniform(4, 10)]
        tau = np.radians(rng.uniform(3, 30)) / (TWO_PI * fc)
        m = PlantModel(zeros=np.array(zeros, dtype=complex), poles=np.array(poles, dtype=complex),
                       k=1.0, delay_s=tau)
        k = 1 / abs(m.response(np.array([fc]))[0]) * rng.uniform(0.7, 1.4)
        out.append(PlantModel(zeros=m.zeros, poles=m.poles, k=k, delay_s=tau))
    return out


# ----------------------------------------------------------------------------- references
def frequency_scale(model: PlantModel) -> float:
    """A frequency (rad/s) in the middle of the model's poles, zeros and delay corner.

    The geometric mean of the nonzero |poles|, |zeros| and 1/delay.  The references
    below write the loop in s̃ = s/ω0 with this ω0, so that the coefficients of
    its polynomials (a 12th-order Padé times a resonance and a compensator) are
    of order one instead of spanning 10^±60: python-control's margin finder
    evaluates them at (jω)^30 and overflowed in unscaled s.
    """
    roots = np.abs(np.concatenate([model.zeros, model.poles]))
    scales = list(roots[roots > 0])
    if model.delay_s:
        scales.append(1.0 / model.delay_s)
    return float(np.exp(np.mean(np.log(scales)))) if scales else 1.0


def control_tf(model: PlantModel, pade_order: int = 0, w0: float = 1.0):
    """The model as a python-control transfer function (delay as a Padé approximant).

    With ``w0`` the function is written in the scaled variable s̃ = s/ω0
    (roots divided by ω0, the gain by ω0^(poles − zeros), the delay times ω0):
    the same loop with its frequency axis in units of ω0, so the margins are
    unchanged, crossing frequencies come out divided by ω0, and closed-loop
    poles keep their signs.
    """
    z, p = model.zeros / w0, model.poles / w0
    k = model.k * w0 ** (model.zeros.size - model.poles.size)
    num = np.real_if_close(np.poly(z) * k) if z.size else np.array([k], dtype=float)
    den = np.real_if_close(np.poly(p))
    g = control.tf(np.real(num), np.real(den))
    if model.delay_s and pade_order:
        pn, pd = control.pade(model.delay_s * w0, pade_order)
        g = g * control.tf(pn, pd)
    return g


def true_stable(model: PlantModel, pade_order: int = 12) -> tuple[bool, float]:
    """Closed-loop stability of 1/(1+T) from python-control's closed-loop poles.

    The delay is replaced by a Padé approximant of ``pade_order``.  Returns
    (stable, max real part of the closed-loop poles relative to their size):
    a value near 0 says the truth itself is marginal.
    """
    g = control_tf(model, pade_order, frequency_scale(model))  # scaled s: same pole signs
    cl = control.feedback(g, 1)
    p = np.asarray(control.poles(cl))
    rel = float(np.max(p.real / np.maximum(np.abs(p), 1e-9)))
    return bool(np.all(p.real < 0)), rel


def true_crossings(model: PlantModel, f_lo: float, f_hi: float, points: int = 4000):
    """Every crossing of the true loop: python-control ``stability_margins`` (returnall) on a
    dense frequency-response evaluation of T (delay exact).

    Returns
    -------
    (pm_deg, wgc_hz, gm_db, wpc_hz)
        Phase margins at every gain crossing, where, gain margins (dB) at every
        phase crossing, where.
    """
    f = np.logspace(math.log10(f_lo), math.log10(f_hi), points)
    w = TWO_PI * f
    sysf = control.frd(model.response(f), w)
    gm, pm, _sm, wpc, wgc, _wms = control.stability_margins(sysf, returnall=True)
    gm = np.asarray(gm, dtype=float)
    return (np.asarray(pm, dtype=float), np.asarray(wgc, dtype=float) / TWO_PI,
            20 * np.log10(gm) if gm.size else gm, np.asarray(wpc, dtype=float) / TWO_PI)


def compensator_tf(kind: str, parts: dict[str, float], w0: float = 1.0):
    """The ideal-op-amp compensator C = Zf/Zi (inversion folded into the loop sign), written
    from the textbook impedances of the network, for python-control.

    With ``w0`` it is written in s̃ = s/ω0 (see :func:`control_tf`): every capacitor
    enters as C·ω0, since 1/(sC) = 1/(s̃·ω0·C).
    """
    r1, r2, c1 = parts["R1"], parts["R2"], parts["C1"] * w0
    if kind == "pi":          # Zf = R2 + 1/(sC1), Zi = R1
        return control.tf([r2 * c1, 1.0], [r1 * c1, 0.0])
    if kind == "type2":       # Zf = (R2 + 1/(sC1)) || 1/(sC2), Zi = R1
        c2 = parts["C2"] * w0
        return control.tf([r2 * c1, 1.0], [r1 * r2 * c1 * c2, r1 * (c1 + c2), 0.0])
    raise ValueError(f"no textbook form here for {kind}")


def independent_yield(plant: PlantModel, kind: str, parts: dict[str, float], pm_target: float,
                      gm_target: float, r_tol: float, c_tol: float, draws: int, seed: int,
                      pade_order: int = 12) -> tuple[float, np.ndarray, np.ndarray]:
    """Yield of the same draws as benchfit's Monte Carlo, judged by python-control.

    The draws repeat benchfit's documented sequence (numpy ``default_rng(seed)``:
    one uniform factor 1 ± tol per part, then two for a divider); each drawn
    loop is the plant (delay as a Padé approximant) times the textbook
    compensator, and it passes when python-control's closed-loop poles are
    all in the left half-plane, every gain crossing's phase margin is at
    least ``pm_target`` and every phase crossing's |gain margin| at least
    ``gm_target`` (no slack).

    Returns
    -------
    yield, worst PM per draw (deg), worst |GM| per draw (dB)
    """
    rng = np.random.default_rng(seed)
    names = list(parts)
    tol = np.array([r_tol if n[0] == "R" else c_tol for n in names])
    factors = 1.0 + tol * rng.uniform(-1.0, 1.0, size=(draws, len(names)))
    w0 = frequency_scale(plant)  # scaled s: the margins are those of the unscaled loop
    g = control_tf(plant, pade_order, w0)
    ok = np.zeros(draws, dtype=bool)
    pm_w = np.full(draws, np.inf)
    gm_w = np.full(draws, np.inf)
    for i in range(draws):
        drawn = {n: parts[n] * factors[i, j] for j, n in enumerate(names)}
        loop = g * compensator_tf(kind, drawn, w0)
        poles = np.asarray(control.poles(control.feedback(loop, 1)))
        gm, pm, _sm, _wpc, _wgc, _wms = control.stability_margins(loop, returnall=True)
        pm = (np.asarray(pm, dtype=float) + 180.0) % 360.0 - 180.0
        gm_db = np.abs(20 * np.log10(np.asarray(gm, dtype=float)))
        pm_w[i] = pm.min() if pm.size else np.inf
        gm_w[i] = gm_db.min() if gm_db.size else np.inf
        ok[i] = bool(np.all(poles.real < 0)) and pm_w[i] >= pm_target and gm_w[i] >= gm_target
    return float(ok.mean()), pm_w, gm_w
