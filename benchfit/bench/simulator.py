"""A small Python model of a generic SCPI frequency-response analyzer, for tests and the demo.

It answers the shipped generic analyzer profile: long/short forms in any
case, an error queue with the standard's error numbers, ASCII and binary
blocks in both byte orders, and data that becomes readable only after the
simulated sweep time (the SCPI side lives in :mod:`benchfit.bench.scpidevice`).
The response comes from any callable ``freq_hz -> complex`` (the bench layer
knows nothing of fitted models); the CLI builds it from a model file or a
measured sweep.  The scope is :mod:`benchfit.bench.simscope`; the bench-like
analyzer (noise density, settling, saturation) :mod:`benchfit.bench.benchlike`.

Transports live in :mod:`benchfit.bench.sim_transport`: a pyvisa-sim device
(genuine pyvisa above it) and a loopback-only TCP socket (pyvisa-py's real
TCPIP SOCKET code).  Both call :meth:`ScpiDevice.receive` with each message
and :meth:`ScpiDevice.take_reply` to collect answers.
"""

from __future__ import annotations

import time
from collections.abc import Callable

import numpy as np

from benchfit.bench.blocks import encode_ascii
from benchfit.bench.scpi import Message, keyword_matches
from benchfit.bench.scpidevice import (  # noqa: F401 - re-exported: the SCPI side lives there
    ERROR_QUEUE_LENGTH,
    ERRORS,
    Faults,
    ScpiDevice,
)
from benchfit.bench.simscope import SimulatedScope, scope_for_trace  # noqa: F401 - re-exported
from benchfit.data.response import FrequencyResponse


class SimulatedAnalyzer(ScpiDevice):
    """A frequency-response analyzer answering the generic analyzer profile.

    Parameters
    ----------
    response_fn
        ``freq_hz -> complex response`` of the simulated device under test.
    noise
        RMS relative complex noise added to each point (0.001 = 0.1 %).
    seed
        Seed of the noise generator.
    time_per_point_s
        Simulated measurement time per point; data and ``*OPC?`` answers are
        held back until the sweep is done.
    f_min_hz, f_max_hz
        Frequency range the instrument accepts (-222 outside).
    data_form
        What ``CALCulate:DATA?`` returns per point: ``"re_im"`` (real, imaginary) or
        ``"db_deg"`` (magnitude in dB, phase in degrees).
    freq_resolution_hz
        The instrument rounds every frequency to this step, so read-back
        frequencies differ slightly from those asked for.
    idn, faults, clock
        See :class:`ScpiDevice`.
    """

    def __init__(self, response_fn: Callable[[np.ndarray], np.ndarray], *, noise: float = 1e-3,
                 seed: int = 0, time_per_point_s: float = 0.0, f_min_hz: float = 1e-3,
                 f_max_hz: float = 1e9, freq_resolution_hz: float = 1e-3,
                 data_form: str = "re_im",
                 idn: str = "benchfit,simulated analyzer,SIM0001,0.1",
                 faults: Faults | None = None, clock: Callable[[], float] = time.monotonic) -> None:
        self.response_fn = response_fn
        self.noise = float(noise)
        self.rng = np.random.default_rng(seed)
        self.time_per_point_s = float(time_per_point_s)
        self.f_min_hz, self.f_max_hz = float(f_min_hz), float(f_max_hz)
        self.freq_resolution_hz = float(freq_resolution_hz)
        if data_form not in ("re_im", "db_deg"):
            raise ValueError(f"data_form {data_form!r}: expected 're_im' or 'db_deg'")
        self.data_form = data_form
        self.axis: np.ndarray | None = None
        self.data: np.ndarray | None = None
        self.sweeps = 0
        super().__init__(idn, faults=faults, clock=clock)

    def reset(self) -> None:
        super().reset()
        self.start_hz, self.stop_hz, self.points = 10.0, 1e5, 201
        self.spacing = "log"
        self.level_v, self.bandwidth_hz = 0.01, 100.0
        self.mode = "sweep"
        self.cw_hz = 1e3
        self.axis = self.data = None

    def _q(self, f: float) -> float:
        r = self.freq_resolution_hz
        return round(f / r) * r if r > 0 else f

    def _commands(self):
        num = self._number
        def setter(attr, lo, hi, cast=float):
            def h(m):
                v = num(m, lo, hi)
                if v is not None:
                    setattr(self, attr, cast(self._q(v)) if cast is float else cast(v))
            return h
        def getter(attr):
            return lambda m: self._reply(encode_ascii([getattr(self, attr)]))
        return super()._commands() + [
            ("[SENSe]:FREQuency:STARt", False, setter("start_hz", self.f_min_hz, self.f_max_hz)),
            ("[SENSe]:FREQuency:STARt", True, getter("start_hz")),
            ("[SENSe]:FREQuency:STOP", False, setter("stop_hz", self.f_min_hz, self.f_max_hz)),
            ("[SENSe]:FREQuency:STOP", True, getter("stop_hz")),
            ("[SENSe]:SWEep:POINts", False, setter("points", 1, 100001, cast=lambda v: int(round(v)))),
            ("[SENSe]:SWEep:POINts", True, getter("points")),
            ("[SENSe]:SWEep:SPACing", False, self._spacing),
            ("[SOURce]:VOLTage[:LEVel][:IMMediate][:AMPLitude]", False, setter("level_v", 1e-6, 10.0)),
            ("[SENSe]:BANDwidth[:RESolution]", False, setter("bandwidth_hz", 1e-3, 1e6)),
            ("[SOURce]:FREQuency:MODE", False, self._mode),
            ("[SOURce]:FREQuency:CW", False, setter("cw_hz", self.f_min_hz, self.f_max_hz)),
            ("[SOURce]:FREQuency:CW", True, getter("cw_hz")),
            ("INITiate[:IMMediate]", False, self._initiate),
            ("[SENSe]:SWEep:AXIS", True, self._axis_query),  # this simulator's own query
            ("CALCulate:DATA", True, self._data_query),
        ]

    def _spacing(self, m: Message) -> None:
        p = m.params[0] if m.params else ""
        if keyword_matches(p, "LOGarithmic"):
            self.spacing = "log"
        elif keyword_matches(p, "LINear"):
            self.spacing = "lin"
        else:
            self.push_error(-224 if p else -109, m.header)

    def _mode(self, m: Message) -> None:
        p = m.params[0] if m.params else ""
        if keyword_matches(p, "CW") or keyword_matches(p, "FIXed"):
            self.mode = "cw"
        elif keyword_matches(p, "SWEep"):
            self.mode = "sweep"
        else:
            self.push_error(-224 if p else -109, m.header)

    def _initiate(self, m: Message) -> None:
        if self.mode == "cw":
            f = np.array([self.cw_hz])
        else:
            if self.stop_hz <= self.start_hz or self.points < 2:
                self.push_error(-221, "start must be below stop and points >= 2")
                return
            i = np.arange(self.points) / (self.points - 1)
            if self.spacing == "log":
                f = self.start_hz * (self.stop_hz / self.start_hz) ** i
            else:
                f = self.start_hz + (self.stop_hz - self.start_hz) * i
            f = np.array([self._q(x) for x in f])
        self.axis, self.data = f, self._measured(f)
        self.busy_until = self._done_at() + self._sweep_time(f)
        self.sweeps += 1

    def _measured(self, f: np.ndarray) -> np.ndarray:
        """The response read at ``f``: the device's plus relative complex noise."""
        h = np.asarray(self.response_fn(f), dtype=complex)
        e = (self.rng.standard_normal(f.size) + 1j * self.rng.standard_normal(f.size)) / np.sqrt(2)
        return h + self.noise * np.abs(h) * e

    def _sweep_time(self, f: np.ndarray) -> float:
        """Simulated time (s) to measure the points ``f``."""
        return self.time_per_point_s * f.size

    def _axis_query(self, m: Message) -> None:
        if self.axis is None:
            self.push_error(-230, "no sweep measured")
            return
        self._reply(self._values(self.axis), at=self._done_at())

    def _data_query(self, m: Message) -> None:
        if self.data is None:
            self.push_error(-230, "no sweep measured")
            return
        if m.params:  # the standard query takes no selector
            self.push_error(-108, m.params[0])
            return
        h = self.data
        if self.data_form == "re_im":
            pairs = np.column_stack([h.real, h.imag])
        else:
            pairs = np.column_stack([20 * np.log10(np.abs(h)), np.degrees(np.angle(h))])
        self._reply(self._values(pairs.reshape(-1)), at=self._done_at())

def interpolated_response(resp: FrequencyResponse) -> Callable[[np.ndarray], np.ndarray]:
    """A ``freq_hz -> complex`` function interpolating a measured sweep.

    Interpolates log-magnitude and unwrapped phase linearly in log frequency,
    which keeps a smooth response smooth between measured points.  Outside the
    measured band the end values are held (the simulated analyzer refuses
    frequencies outside it anyway when built with :func:`analyzer_for_sweep`).
    """
    lf = np.log(resp.freq_hz)
    lm = np.log(np.abs(resp.response))
    ph = np.unwrap(np.angle(resp.response))

    def fn(freq_hz: np.ndarray) -> np.ndarray:
        x = np.log(np.asarray(freq_hz, dtype=float))
        return np.exp(np.interp(x, lf, lm) + 1j * np.interp(x, lf, ph))

    return fn


def analyzer_for_sweep(resp: FrequencyResponse, **options) -> SimulatedAnalyzer:
    """A simulated analyzer answering from a measured sweep, limited to its band."""
    options.setdefault("f_min_hz", resp.f_min_hz)
    options.setdefault("f_max_hz", resp.f_max_hz)
    return SimulatedAnalyzer(interpolated_response(resp), **options)
