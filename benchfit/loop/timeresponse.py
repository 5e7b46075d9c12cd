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

Here: the time span and step of a simulation (:func:`_plan`) and the two
responses, :func:`reference_step` and :func:`load_step`.  The state-space form
and the simulators are in :mod:`benchfit.loop.loopsim`; the step figures
(:func:`~benchfit.loop.stepresponse.step_metrics`) and the result object
(:class:`~benchfit.loop.stepresponse.StepResponse`) in
:mod:`benchfit.loop.stepresponse`; both are re-exported here.
"""


from __future__ import annotations

import math

import numpy as np

from benchfit.errors import InputError
from benchfit.fitting.model import PlantModel
from benchfit.loop.loopsim import sensitivity_step, simulate, state_space, step_samples
from benchfit.loop.margins import margins_of_model
from benchfit.loop.stepresponse import StepResponse, settling_time, step_metrics
from benchfit.provenance import Provenance

__all__ = ["StepResponse", "load_step", "reference_step", "state_space", "step_metrics"]

_BASE_STEPS = 4000
_MAX_STEPS = 400_000

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
        _, z = simulate(A, B, C, D, N, h, w_plus, w_minus)
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
            v = sensitivity_step(z_open, A, B, C, D, h, n + 1, -di)
        else:
            d_plus, d_minus = step_samples(z_open, h, n + 1, -di)
            v, _ = simulate(A, B, C, D, N, h, d_plus, d_minus)
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
    settle = settling_time(t, (v - final) / dev, settle_band) if dev != 0 else float(t[0])
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
