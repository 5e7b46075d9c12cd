"""The loop gain T recovered from measurements taken with the loop closed.

A buffer or a regulator usually cannot be opened.  Three measurement pairs
give T without opening it (all return ratios, PM = 180° + ∠T):

* **closed-loop response and known feedback factor** — a non-inverting stage
  has G = A/(1 + Aβ), so Gβ = T/(1 + T) and ``T = Gβ/(1 − Gβ)``.  For an
  inverting stage G = G_ideal · T/(1 + T) with G_ideal = −Zf/Zi; give the
  ideal gain instead and ``T = x/(1 − x)`` with x = G/G_ideal.
* **voltage and current injection at one point** (Middlebrook 1975, the
  general result, quoted from memory)::

      T = (Tv·Ti − 1)/(Tv + Ti + 2)

  with ``Tv = −v_return/v_forward`` for a series voltage injection (v_forward
  on the side that drives the rest of the loop, v_return on the side driven
  by it) and ``Ti = −i_return/i_forward`` for a shunt current injection at
  the same point (i_forward into the driven side, i_return out of the
  driving side); both equal T at an ideal injection point.  The tests derive
  the formula from a two-port loop with finite source and load impedances.
* **open- and closed-loop output impedance** — Z_cl = Z_ol/(1 + T), so
  ``T = Z_ol/Z_cl − 1`` (the loop must take all its feedback from the
  output node; with a second feedback path from elsewhere Blackman's
  formula has a short-circuit term this ignores).

Each function takes :class:`~benchfit.data.FrequencyResponse` objects (or a
number for β and the ideal gain) and returns a loop-gain sweep
(``quantity = "loop"``) on the first sweep's frequencies; a second sweep on
other frequencies is interpolated (log magnitude and unwrapped phase, linear
in log f) and points outside its span are dropped.
"""

from __future__ import annotations

import numpy as np

from benchfit.data.response import FrequencyResponse
from benchfit.errors import InputError
from benchfit.loop.loopgain import interp_response

#: |1 − x| (or |Tv + Ti + 2|, |Z_cl|) below this, relative, makes a point unusable: T is infinite there.
SINGULAR = 1e-12


def _on_grid(first: FrequencyResponse, other: FrequencyResponse | complex | float,
             what: str) -> tuple[FrequencyResponse, np.ndarray]:
    """(first restricted to the common span, other's values on those frequencies)."""
    if not isinstance(other, FrequencyResponse):
        v = complex(other)
        if not np.isfinite(v) or v == 0:
            raise InputError(f"{what} {other!r}; expected a finite non-zero value", source=what)
        return first, np.full(len(first), v)
    if np.array_equal(first.freq_hz, other.freq_hz):
        return first, np.asarray(other.response)
    vals = interp_response(other, first.freq_hz)
    keep = np.isfinite(vals)
    if keep.sum() < 2:
        raise InputError(f"the {what} sweep ({other.f_min_hz:.4g}..{other.f_max_hz:.4g} Hz) does "
                         f"not overlap the first one ({first.f_min_hz:.4g}..{first.f_max_hz:.4g} Hz)",
                         source=what)
    return _subset(first, keep), vals[keep]


def _subset(r: FrequencyResponse, keep: np.ndarray) -> FrequencyResponse:
    if keep.all():
        return r
    return FrequencyResponse(freq_hz=r.freq_hz[keep], response=r.response[keep],
                             quantity=r.quantity, meta=dict(r.meta), provenance=r.provenance)


def _result(base: FrequencyResponse, num: np.ndarray, den: np.ndarray, method: str,
            settings: dict) -> FrequencyResponse:
    bad = np.abs(den) <= SINGULAR * np.maximum(np.abs(num), 1.0)
    if bad.all():
        raise InputError(f"{method}: the measurements give an infinite loop gain at every point")
    base = _subset(base, ~bad)
    t = num[~bad] / den[~bad]
    return base.with_response(t, quantity="loop", step="loop_recovery",
                              settings={"method": method, **settings,
                                        "dropped_points": int(bad.sum())})


def loop_from_closed_loop(closed: FrequencyResponse, beta: FrequencyResponse | complex | float
                          | None = None, *, ideal_gain: FrequencyResponse | complex | float
                          | None = None) -> FrequencyResponse:
    """T from a measured closed-loop response and the known feedback.

    Parameters
    ----------
    closed
        Measured closed-loop gain G = V_out/V_in.
    beta
        Feedback factor β = V-/V_out (number or sweep), non-inverting stage:
        T = Gβ/(1 − Gβ).
    ideal_gain
        Instead of β: the ideal closed-loop gain G_ideal (e.g. −Rf/Rg for an
        inverting stage, 1/β for a non-inverting one): T = x/(1 − x), x = G/G_ideal.
    """
    if (beta is None) == (ideal_gain is None):
        raise InputError("give the feedback factor β or the ideal closed-loop gain, one of them",
                         source="--beta")
    if beta is not None:
        base, b = _on_grid(closed, beta, "beta")
        x = base.response * b
        how = {"beta": "sweep" if isinstance(beta, FrequencyResponse) else complex(beta).real}
    else:
        base, g = _on_grid(closed, ideal_gain, "ideal gain")
        x = base.response / g
        how = {"ideal_gain": "sweep" if isinstance(ideal_gain, FrequencyResponse)
               else complex(ideal_gain).real}
    return _result(base, x, 1.0 - x, "closed-loop", how)


def loop_from_injection(tv: FrequencyResponse, ti: FrequencyResponse) -> FrequencyResponse:
    """T from voltage- and current-injection ratios at one point:
    T = (Tv·Ti − 1)/(Tv + Ti + 2) (Middlebrook 1975, from memory; see the module notes)."""
    base, i = _on_grid(tv, ti, "current injection")
    v = base.response
    return _result(base, v * i - 1.0, v + i + 2.0, "injection", {})


def loop_from_output_impedance(z_open: FrequencyResponse, z_closed: FrequencyResponse) -> FrequencyResponse:
    """T = Z_ol/Z_cl − 1 from the open- and closed-loop output impedance."""
    base, zc = _on_grid(z_open, z_closed, "closed-loop impedance")
    return _result(base, base.response - zc, zc, "output impedance", {})


#: Error amplification above which :func:`amplification_warning` speaks up.
AMPLIFICATION_WARN = 100.0


def amplification_warning(t: FrequencyResponse, method: str) -> str | None:
    """A warning when the recovery multiplies the measurement's relative error by a lot.

    From the closed loop, T = x/(1 − x) with x = T/(1 + T): a relative error ε in G
    becomes about |1 + T|·ε in T; from the impedances, T + 1 = Zol/Zcl: about
    |(1 + T)/T|·ε·|1 + T| ≈ |1 + T|·ε too.  Where |T| is large the recovered T is
    mostly amplified noise (the crossover region, where |T| ≈ 1, is not).  The
    evidence weighed: the largest |1 + T| of the sweep against 100.
    """
    if method == "injection":
        return None
    amp = float(np.max(np.abs(1.0 + t.response)))
    if amp <= AMPLIFICATION_WARN:
        return None
    f = float(t.freq_hz[int(np.argmax(np.abs(1.0 + t.response)))])
    return (f"the recovered T reaches |1 + T| = {amp:.3g} (at {f:.4g} Hz): a relative error of the "
            f"measurement is multiplied by about that much there, so T far above 0 dB is mostly "
            "noise; the margins near the crossover are unaffected, a stability verdict counted "
            "over the noisy stretch is not")
