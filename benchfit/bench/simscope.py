"""A simulated one-channel scope answering the generic scope profile, and one that replays a
recorded trace (for tests, the demo and ``benchfit scope --simulate``)."""

from __future__ import annotations

import time
from collections.abc import Callable

import numpy as np

from benchfit.bench.blocks import encode_ascii
from benchfit.bench.scpi import Message
from benchfit.bench.scpidevice import Faults, ScpiDevice
from benchfit.data.trace import TimeTrace


class SimulatedScope(ScpiDevice):
    """A one-channel scope answering the generic scope profile.

    Parameters
    ----------
    waveform_fn
        ``time_s -> volts`` of the simulated signal (trigger at t = 0).
    record_points
        Samples per record.
    sample_interval_s
        Sample interval in s.
    pretrigger
        Fraction of the record before the trigger.
    first_sample_time_s
        Time of the first sample in s; overrides ``pretrigger`` when given.
    noise_v
        RMS noise in V added before quantisation.
    channels
        Channel names the scope answers to ("CH1").
    """

    def __init__(self, waveform_fn: Callable[[np.ndarray], np.ndarray], *, record_points: int = 1000,
                 sample_interval_s: float = 1e-6, pretrigger: float = 0.1,
                 first_sample_time_s: float | None = None, noise_v: float = 0.0,
                 seed: int = 0, channels: tuple[str, ...] = ("CH1",),
                 idn: str = "benchfit,simulated scope,SIM0002,0.1",
                 faults: Faults | None = None, clock: Callable[[], float] = time.monotonic) -> None:
        self.waveform_fn = waveform_fn
        self.record_points = int(record_points)
        self.sample_interval_s = float(sample_interval_s)
        self.pretrigger = float(pretrigger)
        self._first_sample_time_s = first_sample_time_s
        self.noise_v = float(noise_v)
        self.rng = np.random.default_rng(seed)
        self.channel_names = tuple(channels)
        self.armed = False
        self.codes: np.ndarray | None = None
        super().__init__(idn, faults=faults, clock=clock)

    @property
    def first_sample_time_s(self) -> float:
        if self._first_sample_time_s is not None:
            return float(self._first_sample_time_s)
        return -self.pretrigger * self.record_points * self.sample_interval_s

    def _commands(self):
        scale = lambda v: (lambda m: self._scale_query(m, v))  # noqa: E731
        return super()._commands() + [
            ("INITiate[:IMMediate]", False, self._arm),
            ("*TRG", False, self._trigger),
            # time axis: the sweep subsystem's point interval and trigger offset (SCPI-1999
            # SENSe:SWEep:TINTerval and SENSe:SWEep:OFFSet:TIME, from memory)
            ("[SENSe]:SWEep:TINTerval", True, scale("interval")),
            ("[SENSe]:SWEep:OFFSet:TIME", True, scale("first")),
            # code scaling, this simulator's own queries (no standard form exists)
            ("TRACe:CODE:VOLTs", True, scale("per_code")),
            ("TRACe:CODE:ZERO", True, scale("at_zero")),
            ("TRACe[:DATA]", True, self._data),
        ]

    def _channel_ok(self, m: Message) -> bool:
        if not m.params or m.params[0].upper() not in self.channel_names:
            self.push_error(-224, f"channel {m.params[0] if m.params else ''!r}")
            return False
        return self._captured()

    def _captured(self) -> bool:
        if self.codes is None:
            self.push_error(-230, "no record captured")
            return False
        return True

    def _arm(self, m: Message) -> None:
        self.armed = True
        self.busy_until = float("inf")  # *OPC? waits for the trigger

    def _trigger(self, m: Message) -> None:
        if not self.armed:
            self.push_error(-221, "trigger while not armed")
            return
        t = self.first_sample_time_s + np.arange(self.record_points) * self.sample_interval_s
        v = np.asarray(self.waveform_fn(t), dtype=float)
        v = v + self.noise_v * self.rng.standard_normal(v.size)
        bits = {"int8": 8, "int32": 32}.get(self.encoding, 16)
        # an ADC whose code zero is not at 0 V, so the offset path is exercised; the signal
        # uses about 90 % of the codes
        half = 2 ** (bits - 1) - 1
        lo, hi = float(v.min()), float(v.max())
        self.volts_per_code = ((hi - lo) or 1.0) * 1.1 / (2 * half)
        self.volts_at_code_zero = (lo + hi) / 2
        self.codes = np.round((v - self.volts_at_code_zero) / self.volts_per_code)
        self.armed = False
        self.busy_until = self.clock() + self.record_points * self.sample_interval_s

    def _scale_query(self, m: Message, which: str) -> None:
        ok = self._channel_ok(m) if which in ("per_code", "at_zero") else self._captured()
        if not ok:
            return
        value = {"interval": self.sample_interval_s, "first": self.first_sample_time_s,
                 "per_code": self.volts_per_code, "at_zero": self.volts_at_code_zero}[which]
        self._reply(encode_ascii([value]))

    def _data(self, m: Message) -> None:
        if not self._channel_ok(m):
            return
        if self.encoding.startswith("int"):
            values = self.codes
        else:  # asked for numbers, the scope scales its codes itself
            values = self.codes * self.volts_per_code + self.volts_at_code_zero
        self._reply(self._values(values), at=self._done_at())


def scope_for_trace(trace: TimeTrace, channel: str | int | None = None, **options) -> SimulatedScope:
    """A simulated scope replaying one channel of a recorded trace on its own time axis."""
    t = trace.time_s
    v = trace.channel(channel)
    options.setdefault("record_points", len(trace))
    options.setdefault("sample_interval_s", (t[-1] - t[0]) / (len(trace) - 1))
    options.setdefault("first_sample_time_s", float(t[0]))
    return SimulatedScope(lambda tt: np.interp(tt, t, v), **options)
