"""Time responses of a closed loop (reference step, load step) with the loop delay exact.

Method
------
The loop gain is T(s) = L(s)·e^(-sτ) with L rational.  L is turned into a
state-space cascade of first- and second-order sections (better conditioned
than one companion form when poles span many decades) and simulated on a
fixed time step h chosen so that the delay is a whole number of steps,
τ = N·h.  Over each step the loop's input is taken as a straight line
between its values at the two ends (first-order hold), and the state update
uses the exact matrix exponential of that piecewise-linear input, so the
only approximation is the straight line between samples: no Padé or other
rational stand-in for the delay is ever used.  Jumps (the step itself, and
its echoes through a loop with direct feed-through) are kept exact by
carrying the value just before and just after every sample instant.

Without delay the closed loop is rational and is simulated the same way
from its own state-space form.  The tests check both paths against
scipy.signal.step, python-control's step_info and the exact series
solution of delayed loops.

Step metrics follow the usual definitions: rise time from 10 % to 90 % of
the change, settling time when the response last enters ±2 % of the change
around the final value, overshoot as a percentage of the change.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from scipy import linalg, signal

from benchfit.errors import InputError
from benchfit.fileio import as_float
from benchfit.fitting.model import PlantModel
from benchfit.loop.margins import margins_of_model
from benchfit.provenance import Provenance

_BASE_STEPS = 4000
_MAX_STEPS = 400_000


# ----------------------------------------------------------------------------- state space
def _factors(roots: np.ndarray) -> list[np.ndarray]:
    """Real monic polynomial factors (degree 1 or 2) of a set of conjugate-closed roots."""
    roots = np.asarray(roots, dtype=complex)
    out: list[np.ndarray] = []
    real = roots[np.abs(roots.imag) <= 1e-9 * np.maximum(np.abs(roots), 1e-300)]
    upper = roots[roots.imag > 1e-9 * np.maximum(np.abs(roots), 1e-300)]
    lower = roots[roots.imag < -1e-9 * np.maximum(np.abs(roots), 1e-300)]
    if upper.size != lower.size:
        raise InputError("poles/zeros are not in conjugate pairs; the model is not a real system")
    for r in upper:
        out.append(np.array([1.0, -2.0 * r.real, abs(r) ** 2]))
    for r in real:
        out.append(np.array([1.0, -r.real]))
    return out


def state_space(model: PlantModel) -> tuple[np.ndarray, np.ndarray, np.ndarray, float]:
    """(A, B, C, D) of the rational part of ``model`` as a cascade of small sections.

    Raises
    ------
    InputError
        When the model has more zeros than poles (not proper).
    """
    if model.zeros.size > model.poles.size:
        raise InputError(f"the model has {model.zeros.size} zeros and {model.poles.size} poles; "
                         "a time response needs a proper model (zeros <= poles)")
    pf = sorted(_factors(model.poles), key=lambda c: abs(c[-1]) ** (1 / (len(c) - 1)))
    zf = sorted(_factors(model.zeros), key=lambda c: -len(c))          # quadratics first
    # sections: pair real poles into quadratics so each section can take two zero orders
    sections: list[list[np.ndarray]] = []
    singles = [c for c in pf if len(c) == 2]
    for c in pf:
        if len(c) == 3:
            sections.append([c])
    while len(singles) >= 2:
        sections.append([singles.pop(0), singles.pop(0)])
    if singles:
        sections.append([singles.pop(0)])
    dens = [np.polymul(*s) if len(s) == 2 else s[0] for s in sections]
    nums: list[np.ndarray] = [np.array([1.0]) for _ in dens]
    for z in zf:
        wz = abs(z[-1]) ** (1 / (len(z) - 1)) if z[-1] != 0 else 0.0
        best, best_d = None, math.inf
        for i, d in enumerate(dens):
            if len(nums[i]) - 1 + len(z) - 1 <= len(d) - 1:
                wd = abs(d[-1]) ** (1 / (len(d) - 1)) if d[-1] != 0 else 0.0
                dist = abs(math.log10((wz + 1e-300) / (wd + 1e-300)))
                if dist < best_d:
                    best, best_d = i, dist
        if best is None:
            raise InputError("cannot arrange the model's zeros into proper sections")
        nums[best] = np.polymul(nums[best], z)
    A = np.zeros((0, 0))
    B = np.zeros((0, 1))
    C = np.zeros((1, 0))
    D = float(model.k)
    first = True
    for num, den in zip(nums, dens, strict=True):
        a, b, c, d = signal.tf2ss(num, den)
        d = float(np.atleast_2d(d)[0, 0])
        if first:   # the whole gain enters at the first section
            A, B, C, D = a, b * model.k, c, d * model.k
            first = False
            continue
        n1, n2 = A.shape[0], a.shape[0]
        A = np.block([[A, np.zeros((n1, n2))], [b @ C, a]])
        B = np.vstack([B, b * D])
        C = np.hstack([d * C, c])
        D = d * D
    return A, B, C, float(D)


def _foh(A: np.ndarray, B: np.ndarray, h: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Exact update for a straight-line input over one step (triangle hold).

    x[k+1] = Φ x[k] + Γ1 u[k] + Γ2 (u[k+1] - u[k]), from the exponential of
    the augmented matrix [[A h, B h, 0], [0, 0, I], [0, 0, 0]].
    """
    n, m = A.shape[0], B.shape[1]
    M = np.zeros((n + 2 * m, n + 2 * m))
    M[:n, :n] = A * h
    M[:n, n:n + m] = B * h
    M[n:n + m, n + m:] = np.eye(m)
    E = linalg.expm(M)
    return E[:n, :n], E[:n, n:n + m], E[:n, n + m:]


def _simulate(A, B, C, D, N: int, h: float, w_plus: np.ndarray, w_minus: np.ndarray):
    """Closed loop e = w - z, z = L(e delayed by N steps); returns (e, z) just after each sample.

    ``w_plus[k]``/``w_minus[k]`` are the input just after / before t_k.
    """
    n = w_plus.size
    if A.shape[0] == 0:            # static loop: z = D e(t - τ)
        A = np.zeros((1, 1))
        B = np.zeros((1, 1))
        C = np.zeros((1, 1))
    if N == 0:
        if abs(1.0 + D) < 1e-12:
            raise InputError("1 + T(∞) = 0: the loop has an algebraic loop with gain -1")
        Acl = A - B @ C / (1.0 + D)
        Bcl = B / (1.0 + D)
        phi, g1, g2 = _foh(Acl, Bcl, h)
        g1, g2 = g1[:, 0], g2[:, 0]
        x = np.zeros(A.shape[0])
        cx = np.empty(n)
        for k in range(n):
            cx[k] = C[0] @ x
            if k + 1 < n:
                x = phi @ x + g1 * w_plus[k] + g2 * (w_minus[k + 1] - w_plus[k])
        z = (cx + D * w_plus) / (1.0 + D)
        return w_plus - z, z
    phi, g1, g2 = _foh(A, B, h)
    g1, g2 = g1[:, 0], g2[:, 0]
    c = C[0]
    e_plus = np.zeros(n)
    e_minus = np.zeros(n)
    z_plus = np.zeros(n)
    x = np.zeros(A.shape[0])
    for k in range(n):
        j = k - N
        ua = e_plus[j] if j >= 0 else 0.0
        um = e_minus[j] if j >= 0 else 0.0
        cx = c @ x
        z_plus[k] = cx + D * ua
        e_plus[k] = w_plus[k] - z_plus[k]
        e_minus[k] = w_minus[k] - (cx + D * um)
        ub = e_minus[j + 1] if j + 1 >= 0 else 0.0
        x = phi @ x + g1 * ua + g2 * (ub - ua)
    return e_plus, z_plus


def _sensitivity_step(z_open: PlantModel, A, B, C, D, h: float, n: int, size: float) -> np.ndarray:
    """Exact samples of S·Z_ol·(size × step) for a loop without delay (one rational system)."""
    Az, Bz, Cz, Dz = state_space(z_open)
    if abs(1.0 + D) < 1e-12:
        raise InputError("1 + T(∞) = 0: the loop has an algebraic loop with gain -1")
    Acl = A - B @ C / (1.0 + D)
    Bcl = B / (1.0 + D)
    nz, nl = Az.shape[0], A.shape[0]
    # series: Z_ol drives the sensitivity; output e = (w - C x)/(1 + D), w = Cz xz + Dz u
    Aa = np.block([[Az, np.zeros((nz, nl))], [Bcl @ Cz, Acl]])
    Ba = np.vstack([Bz, Bcl * Dz])
    Ca = np.hstack([Cz, -C]) / (1.0 + D)
    Da = Dz / (1.0 + D)
    out = np.empty(n)
    if Aa.shape[0] == 0:
        out[:] = Da * size
        return out
    phi, g1, _ = _foh(Aa, Ba, h)
    x = np.zeros(Aa.shape[0])
    for k in range(n):
        out[k] = Ca[0] @ x + Da * size
        x = phi @ x + g1[:, 0] * size
    return out


def _step_samples(model: PlantModel, h: float, n: int, size: float) -> tuple[np.ndarray, np.ndarray]:
    """Exact samples of ``size`` × step response of a rational model (values after/before t_k)."""
    if model.delay_s:
        raise InputError("the open-loop impedance model must not have a delay")
    A, B, C, D = state_space(model)
    after = np.empty(n)
    if A.shape[0] == 0:
        after[:] = D * size
    else:
        phi, g1, _ = _foh(A, B, h)
        x = np.zeros(A.shape[0])
        for k in range(n):
            after[k] = C[0] @ x + D * size
            x = phi @ x + g1[:, 0] * size
    before = after.copy()
    before[0] = 0.0
    return after, before


# ----------------------------------------------------------------------------- metrics
def _crossing_time(t, y, level, start=0) -> float:
    """First time at or after index ``start`` where y reaches ``level`` (interpolated)."""
    idx = np.flatnonzero(y[start:] >= level)
    if idx.size == 0:
        return math.nan
    i = start + int(idx[0])
    if i == 0 or y[i - 1] == y[i]:
        return float(t[i])
    return float(t[i - 1] + (level - y[i - 1]) / (y[i] - y[i - 1]) * (t[i] - t[i - 1]))


def step_metrics(t: np.ndarray, y: np.ndarray, final: float, *, initial: float = 0.0,
                 rise: tuple[float, float] = (0.1, 0.9), band: float = 0.02) -> dict[str, float]:
    """Overshoot, rise and settling time of a step response.

    Parameters
    ----------
    t, y
        Time (s) and response.
    final, initial
        Final and initial values (the change is ``final - initial``).
    rise
        Fractions of the change between which the rise time is measured.
    band
        Settling band as a fraction of the change.

    Returns
    -------
    dict
        ``overshoot_pct``, ``undershoot_pct``, ``rise_time_s``,
        ``settling_time_s`` (nan if the record ends outside the band),
        ``peak_value``, ``peak_time_s`` (refined by a parabola through the
        three samples around the highest one).
    """
    delta = final - initial
    if delta == 0 or not math.isfinite(delta):
        raise InputError(f"the step changes nothing (initial {initial}, final {final})")
    yn = (np.asarray(y, dtype=float) - initial) / delta
    j = int(np.argmax(yn))
    peak, tpk = float(yn[j]), float(t[j])
    if 0 < j < len(yn) - 1:     # parabola through the three samples around the peak
        y0, y1, y2 = yn[j - 1], yn[j], yn[j + 1]
        curv = y0 - 2 * y1 + y2
        if curv < 0 and np.isclose(t[j + 1] - t[j], t[j] - t[j - 1]):
            off = 0.5 * (y0 - y2) / curv
            peak = float(y1 - 0.25 * (y0 - y2) * off)
            tpk = float(t[j] + off * (t[j + 1] - t[j]))
    out = {
        "overshoot_pct": max(0.0, (peak - 1.0) * 100.0),
        "undershoot_pct": max(0.0, -float(np.min(yn)) * 100.0),
        "peak_value": initial + peak * delta,
        "peak_time_s": tpk,
    }
    out["rise_time_s"] = _crossing_time(t, yn, rise[1]) - _crossing_time(t, yn, rise[0])
    out["settling_time_s"] = _settling(t, yn - 1.0, band)
    return out


def _settling(t: np.ndarray, err: np.ndarray, band: float) -> float:
    """Time the normalised error last enters ±band (interpolated); nan if it ends outside."""
    outside = np.flatnonzero(np.abs(err) > band)
    if outside.size == 0:
        return float(t[0])
    i = int(outside[-1])
    if i == len(t) - 1:
        return math.nan
    a, b = abs(err[i]), abs(err[i + 1])
    frac = (a - band) / (a - b) if a != b else 0.0
    return float(t[i] + frac * (t[i + 1] - t[i]))


# ----------------------------------------------------------------------------- result
@dataclass(frozen=True, eq=False)
class StepResponse:
    """A predicted step response.

    Attributes
    ----------
    kind
        ``"reference"`` (output for a reference step) or ``"load"`` (output
        deviation for a load-current step).
    time_s, value
        The response (V for both kinds: output, or output deviation).
    step_size
        Reference step (V at the reference input) or load-current step (A).
    final_value
        Exact final value from the model (V).
    peak_value, peak_time_s
        Largest excursion (for a load step: largest deviation, either sign).
    overshoot_pct, undershoot_pct, rise_time_s
        Reference step only (nan for a load step).
    settling_time_s
        When the response last enters the settling band: ±band of the change
        (reference) or of the peak deviation from the final value (load).
    settle_band
        The band as a fraction.
    delay_s
        The loop delay simulated exactly.
    warnings, provenance
    """

    kind: str
    time_s: np.ndarray
    value: np.ndarray
    step_size: float
    final_value: float
    peak_value: float
    peak_time_s: float
    overshoot_pct: float
    undershoot_pct: float
    rise_time_s: float
    settling_time_s: float
    settle_band: float
    delay_s: float
    warnings: tuple[str, ...] = ()
    provenance: Provenance = field(default_factory=lambda: Provenance(step="step_response"))

    _FLOATS = ("step_size", "final_value", "peak_value", "peak_time_s", "overshoot_pct",
               "undershoot_pct", "rise_time_s", "settling_time_s", "settle_band", "delay_s")

    def to_dict(self) -> dict[str, Any]:
        d: dict[str, Any] = {"kind": "step_response", "step_kind": self.kind,
                             "time_s": np.asarray(self.time_s).tolist(),
                             "value": np.asarray(self.value).tolist()}
        for k in self._FLOATS:
            d[k] = float(getattr(self, k))
        d["warnings"] = list(self.warnings)
        d["provenance"] = self.provenance.to_dict()
        return d

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> StepResponse:
        if not isinstance(d, dict) or d.get("kind") != "step_response":
            raise InputError("expected a step-response object (kind 'step_response')")
        return cls(kind=str(d.get("step_kind", "reference")),
                   time_s=np.asarray(d["time_s"], dtype=float), value=np.asarray(d["value"], dtype=float),
                   warnings=tuple(d.get("warnings", ())), provenance=Provenance.from_dict(d.get("provenance")),
                   **{k: as_float(d.get(k)) for k in cls._FLOATS})


# ----------------------------------------------------------------------------- planning
def _plan(loop: PlantModel, t_end_s: float | None, steps: int | None,
          other_poles: np.ndarray | None = None):
    """(t_end, h, N, n, margins, warnings): span, time step, delay in steps, steps.

    ``other_poles`` (rad/s) are poles of whatever else shapes the response
    (the open-loop impedance for a load step); their decay widens the span.
    """
    warnings: list[str] = []
    m = margins_of_model(loop)
    tau = loop.delay_s
    if t_end_s is None:
        wc = 2 * np.pi * m.crossover_hz if math.isfinite(m.crossover_hz) else math.nan
        A, B, C, D = state_space(loop)
        slow = math.nan
        if A.shape[0] and abs(1 + D) > 1e-12:
            cl = np.linalg.eigvals(A - B @ C / (1 + D))
            decay = -cl.real[cl.real < 0]
            slow = float(decay.min()) if decay.size else math.nan
        if other_poles is not None and np.any(np.real(other_poles) < 0):
            d2 = float(np.min(-np.real(other_poles)[np.real(other_poles) < 0]))
            slow = d2 if math.isnan(slow) else min(slow, d2)
        cands = []
        if math.isfinite(wc):
            cands.append(30.0 / wc)
        if math.isfinite(slow) and slow > 0:
            cands.append(min(8.0 / slow, 3000.0 / wc) if math.isfinite(wc) else 8.0 / slow)
        if not cands:
            raise InputError("cannot choose a time span for this loop (no crossover, no decay); "
                             "give t_end_s")
        t_end = max(cands) + 5.0 * tau
    else:
        t_end = float(t_end_s)
        if not (math.isfinite(t_end) and t_end > 0):
            raise InputError(f"t_end_s must be > 0, found {t_end_s}", source="t_end_s")
    n = int(steps or _BASE_STEPS)
    if math.isfinite(m.crossover_hz):        # at least 40 steps per crossover period
        n = max(n, int(t_end * m.crossover_hz * 40))
    h = t_end / n
    N = 0
    if tau > 0:
        N = max(1, math.ceil(tau / h))
        h = tau / N
        n = math.ceil(t_end / h)
    if n > _MAX_STEPS:
        raise InputError(f"the time response needs {n} steps (delay {tau:.3g} s against a span of "
                         f"{t_end:.3g} s); give a shorter t_end_s")
    if not m.closed_loop_stable:
        warnings.append("the closed loop is unstable: the response grows without bound")
    return t_end, h, N, n, m, warnings


def _settled(y: np.ndarray, final: float, scale: float, band: float) -> bool:
    tail = y[int(0.9 * y.size):]
    return bool(np.all(np.abs(tail - final) <= band * abs(scale)))


# ----------------------------------------------------------------------------- public
def reference_step(loop: PlantModel, *, sensing_gain: float = 1.0, step: float = 1.0,
                   t_end_s: float | None = None, settle_band: float = 0.02,
                   steps: int | None = None) -> StepResponse:
    """Output response to a reference step, V_out/V_ref = (1/β)·T/(1+T).

    Parameters
    ----------
    loop
        Loop gain T as a PlantModel (its delay simulated exactly).
    sensing_gain
        β = V_feedback / V_out.
    step
        Size of the reference step (V at the reference input).
    t_end_s
        Time span; chosen from the crossover and the slowest closed-loop
        pole when None, and doubled (up to three times) until the response
        has settled.
    settle_band
        Settling band, fraction of the change (0.02 = 2 %).
    steps
        Minimum number of time steps.

    Returns
    -------
    StepResponse
    """
    beta = float(sensing_gain)
    if not (math.isfinite(beta) and beta > 0):
        raise InputError(f"sensing gain must be > 0, found {sensing_gain}", source="sensing_gain")
    A, B, C, D = state_space(loop)
    if np.any(loop.poles == 0):
        final = step / beta
    else:
        t0 = loop.dc_gain()
        final = step / beta * t0 / (1.0 + t0)
    t_end, h, N, n, m, warnings = _plan(loop, t_end_s, steps)
    for attempt in range(4):
        t = np.arange(n + 1) * h
        w_plus = np.full(n + 1, float(step))
        w_minus = w_plus.copy()
        w_minus[0] = 0.0
        _, z = _simulate(A, B, C, D, N, h, w_plus, w_minus)
        y = z / beta
        if (t_end_s is not None or not m.closed_loop_stable or attempt == 3
                or _settled(y, final, final, settle_band)):
            break
        n *= 2
        if n > _MAX_STEPS:
            break
    if m.closed_loop_stable and not _settled(y, final, final, settle_band):
        warnings.append("the response has not settled by the end of the record")
    met = step_metrics(t, y, final, band=settle_band)
    prov = Provenance(step="reference_step", settings={"sensing_gain": beta, "step": step,
                                                       "time_step_s": h, "delay_steps": N},
                      parents=(loop.provenance.to_dict(),))
    return StepResponse(kind="reference", time_s=t, value=y, step_size=float(step), final_value=final,
                        peak_value=met["peak_value"], peak_time_s=met["peak_time_s"],
                        overshoot_pct=met["overshoot_pct"], undershoot_pct=met["undershoot_pct"],
                        rise_time_s=met["rise_time_s"], settling_time_s=met["settling_time_s"],
                        settle_band=settle_band, delay_s=loop.delay_s, warnings=tuple(warnings),
                        provenance=prov)


def load_step(z_open: PlantModel, loop: PlantModel, *, current_step_a: float = 1.0,
              t_end_s: float | None = None, settle_band: float = 0.02,
              steps: int | None = None) -> StepResponse:
    """Output-voltage deviation after a load-current step, from Z_cl = Z_ol/(1+T).

    A load current rising by ΔI pulls the output down by ΔI·Z_ol open-loop;
    the loop answers through the sensitivity 1/(1+T), delay exact.

    Parameters
    ----------
    z_open
        Open-loop output impedance model (ohm), rational (no delay).
    loop
        Loop gain T.
    current_step_a
        ΔI, A (positive: more load current).
    t_end_s, settle_band, steps
        As for :func:`reference_step`; the settling band is a fraction of the
        peak deviation from the final value.

    Returns
    -------
    StepResponse
        ``value`` is the output deviation (V), ``peak_value`` the largest one.
    """
    di = float(current_step_a)
    if not math.isfinite(di) or di == 0:
        raise InputError(f"load step must be a non-zero current, found {current_step_a}",
                         source="current_step_a")
    A, B, C, D = state_space(loop)
    t_end, h, N, n, m, warnings = _plan(loop, t_end_s, steps, other_poles=z_open.poles)
    # final value: Z_cl at a frequency far below everything (exact 0 with an integrator)
    if np.any(loop.poles == 0):
        final = 0.0 if not np.any(z_open.poles == 0) else math.nan
    else:
        t0 = loop.dc_gain()
        final = -di * z_open.dc_gain() / (1.0 + t0)
    if not math.isfinite(final):
        sing = np.abs(np.concatenate([z_open.poles, z_open.zeros, loop.poles, loop.zeros]))
        f0 = (sing[sing > 0].min() if np.any(sing > 0) else 1.0) * 1e-7
        s0 = np.array([2j * np.pi * f0])
        final = float(np.real(-di * z_open.at_s(s0)[0] / (1.0 + loop.at_s(s0)[0])))
    for attempt in range(4):
        t = np.arange(n + 1) * h
        if N == 0:      # rational end to end: exact samples
            v = _sensitivity_step(z_open, A, B, C, D, h, n + 1, -di)
        else:
            d_plus, d_minus = _step_samples(z_open, h, n + 1, -di)
            v, _ = _simulate(A, B, C, D, N, h, d_plus, d_minus)
        j = int(np.argmax(np.abs(v - final)))
        dev = v[j] - final
        if (t_end_s is not None or not m.closed_loop_stable or attempt == 3
                or _settled(v, final, dev, settle_band)):
            break
        n *= 2
        if n > _MAX_STEPS:
            break
    j = int(np.argmax(np.abs(v)))
    dev = v[int(np.argmax(np.abs(v - final)))] - final
    settle = _settling(t, (v - final) / dev, settle_band) if dev != 0 else float(t[0])
    if m.closed_loop_stable and not _settled(v, final, dev, settle_band):
        warnings.append("the output has not recovered by the end of the record")
    prov = Provenance(step="load_step", settings={"current_step_a": di, "time_step_s": h,
                                                  "delay_steps": N},
                      parents=(z_open.provenance.to_dict(), loop.provenance.to_dict()))
    return StepResponse(kind="load", time_s=t, value=v, step_size=di, final_value=final,
                        peak_value=float(v[j]), peak_time_s=float(t[j]), overshoot_pct=math.nan,
                        undershoot_pct=math.nan, rise_time_s=math.nan, settling_time_s=settle,
                        settle_band=settle_band, delay_s=loop.delay_s, warnings=tuple(warnings),
                        provenance=prov)
