"""A simulated analyzer that behaves like a bench: noise density, settling, saturation.

:class:`BenchAnalyzer` answers the same SCPI commands as
:class:`~benchfit.bench.simulator.SimulatedAnalyzer` but models what makes a
real loop measurement slow or wrong:

* **Noise from a density.**  Each of the two analyzer channels (the reference
  channel A and the response channel B) adds complex Gaussian noise of rms
  ``noise_density_v · sqrt(B_eff)``, where ``B_eff = min(bandwidth, f)`` (an
  analyzer integrates at least one whole cycle).  The reading is the ratio
  ``(T·A + n_B) / (A + n_A)``, so the relative error falls as the bandwidth
  narrows and as the level rises, and grows where a channel's signal is
  small.  With ``injection=True`` (a loop gain measured by injecting across a
  resistor in the loop, the usual set-up) the channels see ``|A| = L/|1+T|``
  and ``|B| = L·|T|/|1+T|`` for a source level L; otherwise (a plant driven
  directly) ``|A| = L`` and ``|B| = L·|H|``.
* **Time from settling and integration.**  A reading takes
  ``overhead_s + 1/B_eff`` plus, when the frequency, level or bandwidth
  changed since the last reading, ``max(settle_cycles/f, settle_min_s)``; so
  a 10 Hz point at 10 Hz bandwidth costs a second or more, while a repeat at
  the same setting costs only its integration time.
* **Soft saturation.**  With ``saturation_v`` set, the signal at the response
  channel's node passes a ``V_sat·tanh(v/V_sat)`` stage; the loop gain read
  is multiplied by that stage's describing function at the node's amplitude,
  so it falls (smoothly, ``1 − x²/4`` for small ``x = |B|/V_sat``) as the
  level rises: what a linearity check must find.
* **Simulated time.**  With a :class:`VirtualClock` (the default) nothing
  sleeps: when the host waits for a reply that is due later, the clock jumps
  to it.  :attr:`BenchAnalyzer.measuring_s` totals the instrument time spent
  measuring.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

from benchfit.bench.simulator import SimulatedAnalyzer

# Gauss-Legendre nodes on [0, pi] for the describing-function integral (smooth integrand).
_GL_X, _GL_W = np.polynomial.legendre.leggauss(48)
_THETA = 0.5 * np.pi * (_GL_X + 1.0)
_THETA_W = 0.5 * np.pi * _GL_W


class VirtualClock:
    """Simulated time in s: advances only when someone waits on the instrument."""

    def __init__(self, start: float = 0.0) -> None:
        self.now = float(start)

    def __call__(self) -> float:
        return self.now

    def advance_to(self, t: float) -> None:
        """Move the clock forward to ``t`` (never backward)."""
        if t > self.now:
            self.now = float(t)


def tanh_describing_function(x: np.ndarray) -> np.ndarray:
    """Describing function of ``tanh(u)`` for a sine of amplitude ``x`` (gain, real, <= 1).

    ``N(x) = (2 / (π x)) ∫_0^π tanh(x sin θ) sin θ dθ``: the fundamental of the
    output over the input amplitude.  ``N → 1 − x²/4`` for small ``x`` and
    ``N → 4/(π x)`` (an ideal relay) for large ``x``.
    """
    x = np.asarray(x, dtype=float)
    xs = np.maximum(x, 1e-12)[..., None]
    integral = np.sum(np.tanh(xs * np.sin(_THETA)) * np.sin(_THETA) * _THETA_W, axis=-1)
    return np.where(x < 1e-6, 1.0 - x ** 2 / 4.0, 2.0 * integral / (np.pi * xs[..., 0]))


class BenchAnalyzer(SimulatedAnalyzer):
    """A simulated analyzer with bench-like noise, timing and saturation (module notes).

    Parameters
    ----------
    response_fn
        ``freq_hz -> complex`` loop gain (or plant) of the device under test.
    noise_density_v
        Noise density of each channel, V/√Hz.
    settle_cycles
        Cycles of the stimulus waited after a change of frequency, level or bandwidth.
    settle_min_s
        Shortest settling wait, s.
    overhead_s
        Fixed cost of every reading (commands, transfer), s.
    saturation_v
        Amplitude scale of the soft saturation at the response node, V (None: linear).
    injection
        True: a loop gain measured by injection (channel amplitudes as in the
        module notes); False: a plant driven directly.
    noise
        Extra relative noise (a floor, as in :class:`SimulatedAnalyzer`).
    clock
        The clock; a fresh :class:`VirtualClock` when None.
    **options
        Passed to :class:`SimulatedAnalyzer` (seed, frequency limits, faults...).
    """

    def __init__(self, response_fn: Callable[[np.ndarray], np.ndarray], *,
                 noise_density_v: float = 0.0, settle_cycles: float = 0.0, settle_min_s: float = 0.0,
                 overhead_s: float = 0.0, saturation_v: float | None = None, injection: bool = True,
                 noise: float = 0.0, clock: Callable[[], float] | None = None, **options) -> None:
        self.noise_density_v = float(noise_density_v)
        self.settle_cycles = float(settle_cycles)
        self.settle_min_s = float(settle_min_s)
        self.overhead_s = float(overhead_s)
        self.saturation_v = None if saturation_v is None else float(saturation_v)
        self.injection = bool(injection)
        self.measuring_s = 0.0
        self.readings = 0
        self._last_state: tuple[float, float, float] | None = None
        super().__init__(response_fn, noise=noise, clock=clock or VirtualClock(), **options)

    # ----- the device under test as the analyzer sees it --------------------------------
    def channel_amplitudes(self, t: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """(|A|, |B|) in V at the source level for loop gain values ``t``."""
        lv = self.level_v
        if self.injection:
            a = lv / np.maximum(np.abs(1.0 + t), 1e-12)
            return a, a * np.abs(t)
        return np.full(t.shape, lv), lv * np.abs(t)

    def effective_bandwidth(self, f: np.ndarray) -> np.ndarray:
        """The bandwidth actually integrated: at most the frequency (one whole cycle)."""
        return np.minimum(self.bandwidth_hz, np.asarray(f, dtype=float))

    def _measured(self, f: np.ndarray) -> np.ndarray:
        t = np.asarray(self.response_fn(f), dtype=complex)
        a, b = self.channel_amplitudes(t)
        if self.saturation_v is not None:
            t = t * tanh_describing_function(b / self.saturation_v)
        rms = self.noise_density_v * np.sqrt(self.effective_bandwidth(f))
        def cn() -> np.ndarray:
            return (self.rng.standard_normal(f.size) + 1j * self.rng.standard_normal(f.size)) / np.sqrt(2)
        na, nb = rms * cn(), rms * cn()
        h = (t * a + nb) / (a + na)
        if self.noise:
            h = h * (1.0 + self.noise * cn())
        return h

    def _sweep_time(self, f: np.ndarray) -> float:
        f = np.asarray(f, dtype=float)
        settle = np.maximum(self.settle_cycles / f, self.settle_min_s)
        state = (float(f[0]), float(self.level_v), float(self.bandwidth_hz))
        if f.size == 1 and state == self._last_state:
            settle = np.zeros(1)          # a repeat at the same setting needs no new settling
        self._last_state = state if f.size == 1 else None
        t = float(np.sum(self.overhead_s + 1.0 / self.effective_bandwidth(f) + settle))
        self.measuring_s += t
        self.readings += int(f.size)
        return t

    # ----- simulated time ----------------------------------------------------------------
    def take_reply(self) -> bytes | None:
        with self.lock:
            if self.replies and isinstance(self.clock, VirtualClock):
                self.clock.advance_to(self.replies[0][0])
            return super().take_reply()
