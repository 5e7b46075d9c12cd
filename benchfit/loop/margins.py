"""Stability margins of a loop gain T(jω), from a model or from measured data.

Conventions
-----------
* T is the return ratio: the closed loop is stable when 1 + T has no zeros in
  the right half-plane.  Phase margin at a gain crossing (|T| = 1) is
  ``PM = 180° + ∠T`` wrapped to (-180°, 180°]; gain margin at a phase crossing
  (∠T = -180° mod 360°) is ``GM = -20·log10|T|``.
* **Every** crossing found in the band is reported in ``crossings``.  The
  *main* crossover is the highest-frequency falling gain crossing that ends a
  *broad* stretch of |T| > 1: one that starts at the bottom of the band or
  spans at least half a decade (our own threshold: a resonance that pokes
  above 0 dB is narrower than that unless it rises tens of dB).  If no stretch
  is broad, the longest one wins.  For an ordinary loop this is the loop
  bandwidth; a resonance above it does not take its place (its crossings are
  still listed, and a warning names any crossing closer to -1), and a dip
  below 0 dB in mid-band (conditionally stable designs) does not pull the
  crossover down to the dip.  ``phase_margin_deg`` is the phase margin *at the
  main crossover*.
* ``gain_margin_db`` is the smallest positive gain margin: how much the gain
  may rise before the loop goes unstable.  A phase crossing where |T| > 1
  gives a negative value, the gain *reduction* the loop tolerates
  (conditionally stable loops, open-loop-unstable plants); the one closest to
  0 dB is ``gain_reduction_margin_db``.  When the closed loop is unstable,
  ``gain_margin_db`` is the phase crossing closest to 0 dB, whatever its sign.
* ``delay_margin_s`` is the smallest extra pure delay that makes the loop
  unstable: min over gain crossings of ``(PM mod 360°) / ω`` (0 when the loop
  is already unstable).
* ``modulus_margin`` is min |1 + T| over the band, ``peak_sensitivity`` its
  inverse Ms, both with their frequency.  A minimum at the top edge of the
  band is reported as found (not as infinity), with a warning if |1 + T| is
  still falling there.
* Closed-loop stability comes from the Nyquist criterion: the winding of
  1 + T around 0, counted from the dense evaluation (delay included exactly),
  plus the contributions of the low-frequency asymptote (``n`` integrators)
  and the high-frequency end, ``Z = P - N`` with ``P`` the number of
  open-loop right-half-plane poles the caller states.

From a model the loop is evaluated on a dense log grid that is refined until
neighbouring points differ by little in phase and gain, and every crossing is
then polished with Brent's method on log f.  From data, crossings are
interpolated linearly in log f on dB and unwrapped phase, and warnings say
where the sweep is too coarse to trust the numbers.
"""


from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import replace

import numpy as np

from benchfit.errors import InputError
from benchfit.loop.densegrid import MAX_POINTS, LoopFn, dense_grid, model_band
from benchfit.loop.marginsbatch import margins_batch
from benchfit.loop.marginscore import Curve, analyse, unwrapped_phase
from benchfit.loop.marginsresult import Margins
from benchfit.provenance import Provenance

__all__ = ["Margins", "margins_from_data", "margins_of_sweep", "margins_from_model",
           "margins_of_model", "margins_batch", "model_band"]


def margins_from_data(freq_hz, loop_response, *, unstable_open_loop_poles: int = 0,
                      integrators: int | None = None,
                      provenance: Provenance | None = None) -> Margins:
    """Margins of a sampled loop gain (a measured or computed sweep).

    Crossings are interpolated linearly in log-frequency on magnitude (dB)
    and unwrapped phase.  Warnings say where the sweep is too coarse (phase
    steps of more than 15° next to a crossing, 45° anywhere the gain is above
    -20 dB, one-point peaks) or does not reach the crossover.

    Parameters
    ----------
    freq_hz
        Frequencies in Hz, strictly increasing and positive.
    loop_response
        Complex loop gain T (return ratio) at those frequencies.
    unstable_open_loop_poles
        Number of open-loop right-half-plane poles P (for the Nyquist count).
    integrators
        Number of open-loop poles at s = 0; estimated from the fit of the low-frequency
        asymptote (:mod:`benchfit.loop.asymptote`) when None.
    provenance
        Provenance of the data; the result's provenance derives from it.

    Returns
    -------
    Margins
    """
    f = np.asarray(freq_hz, dtype=float).reshape(-1)
    T = np.asarray(loop_response, dtype=complex).reshape(-1)
    if f.shape != T.shape or f.size < 3:
        raise InputError(f"margins need at least 3 points with one response each; found {f.size} "
                         f"frequencies and {T.size} responses")
    if not (np.all(np.isfinite(f)) and np.all(f > 0) and np.all(np.diff(f) > 0)):
        raise InputError("frequencies must be positive, finite and strictly increasing")
    if not np.all(np.isfinite(T)) or np.any(T == 0):
        raise InputError("the loop response must be finite and non-zero at every point")
    _check_poles(unstable_open_loop_poles)
    prov = (provenance or Provenance(step="data")).derive(
        "margins", {"from": "data", "unstable_open_loop_poles": int(unstable_open_loop_poles)})
    curve = Curve(f=f, T=T, phase=np.degrees(np.unwrap(np.angle(T))), exact=None)
    return analyse(curve, unstable=int(unstable_open_loop_poles), integrators=integrators,
                    data=True, extra_warnings=(), provenance=prov)


def margins_of_sweep(resp, *, unstable_open_loop_poles: int = 0) -> Margins:
    """Margins of a :class:`~benchfit.data.FrequencyResponse` holding a loop gain."""
    return margins_from_data(resp.freq_hz, resp.response,
                             unstable_open_loop_poles=unstable_open_loop_poles,
                             provenance=resp.provenance)


def _check_poles(p) -> None:
    if int(p) != p or p < 0:
        raise InputError(f"number of unstable open-loop poles must be an integer >= 0, found {p}",
                         source="--unstable-poles")


# ----------------------------------------------------------------------------- models

def margins_from_model(loop_fn: LoopFn, f_min_hz: float, f_max_hz: float, *,
                       unstable_open_loop_poles: int = 0, delay_s: float = 0.0,
                       integrators: int | None = None, hint_freqs_hz: Sequence[float] = (),
                       points_per_decade: int = 100,
                       provenance: Provenance | None = None) -> Margins:
    """Margins of a loop gain given as a function of frequency.

    The loop is evaluated on a log grid (``points_per_decade``, plus clusters
    around ``hint_freqs_hz``), refined by bisection until neighbouring points
    differ by at most 2° in phase (where |T| > -60 dB), 1 dB in gain (within
    ±40 dB of 0 dB) and 5° in ∠(1+T); every crossing is then polished with
    Brent's method on log f and the modulus margin with a bounded minimiser.
    Phase crossings where |T| < -60 dB (gain margin above 60 dB, e.g. a
    delay's phase spinning far above crossover) are not resolved and not listed.

    Parameters
    ----------
    loop_fn
        Maps an array of frequencies (Hz) to the complex loop gain T.
    f_min_hz, f_max_hz
        Band to examine.  For a sure stability verdict, start it where the
        loop has reached its low-frequency asymptote and end it where |T| < 1.
    unstable_open_loop_poles
        Number of open-loop right-half-plane poles P.
    delay_s
        An extra pure delay multiplied into the loop, exactly (e^(-sτ)).
    integrators
        Open-loop poles at s = 0 (estimated from the fit of the low-frequency asymptote
        when None).
    hint_freqs_hz
        Frequencies of known singularities (lightly damped poles, zeros) to
        sample finely.
    points_per_decade
        Initial grid density.
    provenance
        What the loop came from.

    Returns
    -------
    Margins
    """
    f_min, f_max = float(f_min_hz), float(f_max_hz)
    if not (0 < f_min < f_max and math.isfinite(f_max)):
        raise InputError(f"band {f_min_hz}..{f_max_hz} Hz: expected 0 < f_min < f_max")
    tau = float(delay_s)
    if not math.isfinite(tau) or tau < 0:
        raise InputError(f"delay must be finite and >= 0 s, found {delay_s}")
    _check_poles(unstable_open_loop_poles)

    def fn(freq):
        T = np.asarray(loop_fn(freq), dtype=complex)
        return T * np.exp(-2j * np.pi * freq * tau) if tau else T

    f, T, capped = dense_grid(fn, f_min, f_max, points_per_decade, hint_freqs_hz)
    extra = []
    if capped:
        extra.append(f"the loop could not be resolved with {MAX_POINTS} points; narrow the band")
    prov = (provenance or Provenance(step="model")).derive(
        "margins", {"from": "model", "f_min_hz": f_min, "f_max_hz": f_max, "delay_s": tau,
                    "unstable_open_loop_poles": int(unstable_open_loop_poles), "points": int(f.size)})
    curve = Curve(f=f, T=T, phase=unwrapped_phase(T), exact=fn)
    return analyse(curve, unstable=int(unstable_open_loop_poles), integrators=integrators,
                    data=False, extra_warnings=extra, provenance=prov)



def margins_of_model(model, *, f_min_hz: float | None = None, f_max_hz: float | None = None,
                     unstable_open_loop_poles: int | None = None) -> Margins:
    """Margins of a loop gain held as a :class:`~benchfit.fitting.model.PlantModel`.

    The band, the number of integrators, the right-half-plane pole count and
    the frequencies to sample finely all come from the model's poles and
    zeros; its delay is applied exactly.
    """
    lo, hi = model_band(model)
    lo = lo if f_min_hz is None else float(f_min_hz)
    hi = hi if f_max_hz is None else float(f_max_hz)
    scale = max(1.0, float(np.max(np.abs(model.poles)))) if model.poles.size else 1.0
    P = int(np.sum(model.poles.real > 1e-12 * scale)) if unstable_open_loop_poles is None \
        else int(unstable_open_loop_poles)
    n_int = int(np.sum(model.poles == 0))
    hints = np.abs(np.concatenate([model.poles, model.zeros])) / (2 * np.pi)
    rational = type(model)(zeros=model.zeros, poles=model.poles, k=model.k, delay_s=0.0,
                           provenance=model.provenance)
    m = margins_from_model(rational.response, lo, hi, unstable_open_loop_poles=P,
                           delay_s=model.delay_s, integrators=n_int,
                           hint_freqs_hz=hints[hints > 0], provenance=model.provenance)
    p = model.poles
    on_axis = p[(p != 0) & (np.abs(p.real) <= 1e-12 * np.maximum(np.abs(p), 1.0)) & (p.imag > 0)]
    if on_axis.size:
        where = ", ".join(f"{v:.4g}" for v in np.abs(on_axis) / (2 * np.pi))
        m = replace(m, warnings=m.warnings + (
            f"the loop has undamped poles on the imaginary axis ({where} Hz): the encirclement "
            "count does not go around them, so the stability verdict is not reliable",))
    return m
