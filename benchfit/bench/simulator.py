"""A small Python model of a generic SCPI instrument, for tests and the demo.

It answers the shipped generic profiles: long/short forms in any case, an
error queue with the standard's error numbers, ASCII and binary blocks in
both byte orders, and data that becomes readable only after the simulated
sweep (or record) time.  The response comes from any callable
``freq_hz -> complex`` (the bench layer knows nothing of fitted models); the
CLI builds it from a model file or a measured sweep.

Transports live in :mod:`benchfit.bench.sim_transport`: a pyvisa-sim device
(genuine pyvisa above it) and a loopback-only TCP socket (pyvisa-py's real
TCPIP SOCKET code).  Both call :meth:`ScpiDevice.receive` with each message
and :meth:`ScpiDevice.take_reply` to collect answers.

Fault hooks (:class:`Faults`) let tests time out the Nth query, drop the
connection, corrupt a block or inject an instrument error.
"""

from __future__ import annotations

import threading
import time
from collections import deque
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from benchfit.bench.blocks import build_block, encode_ascii
from benchfit.bench.scpi import Message, header_matches, keyword_matches, parse_unit, split_units
from benchfit.data.response import FrequencyResponse
from benchfit.data.trace import TimeTrace

# SCPI-1999 Vol. 2 §21.8 standard error numbers and texts (from memory).
ERRORS = {
    -100: "Command error", -102: "Syntax error", -104: "Data type error",
    -108: "Parameter not allowed", -109: "Missing parameter", -113: "Undefined header",
    -200: "Execution error", -221: "Settings conflict", -222: "Data out of range",
    -224: "Illegal parameter value", -230: "Data corrupt or stale", -350: "Queue overflow",
}
ERROR_QUEUE_LENGTH = 10   # SCPI requires at least 2; many instruments keep 10-30


@dataclass
class Faults:
    """Faults a test can inject (1-based counts over queries received).

    Parameters
    ----------
    timeout_on_query
        The reply to this query is held back (see ``late_reply_s``).
    late_reply_s
        How long the held-back reply is late; ``None`` drops it entirely.  A
        late reply lands in the next read, as pyvisa-py sees on a socket.
    drop_on_query
        The connection drops when this query arrives (no reply, nothing after).
    corrupt_block_on_query
        This query's block announces more bytes than it carries.
    error_on_header
        Any command whose header matches this pattern puts ``error_code`` on
        the error queue (the command still runs).
    error_code
        The SCPI error number injected by ``error_on_header``.
    error_on_occurrence
        Inject only on this occurrence (1-based) of the header; None: every time.
    """

    timeout_on_query: int | None = None
    late_reply_s: float | None = None
    drop_on_query: int | None = None
    corrupt_block_on_query: int | None = None
    error_on_header: str | None = None
    error_code: int = -222
    error_on_occurrence: int | None = None


class ScpiDevice:
    """IEEE 488.2 common commands, the error queue, output timing and faults.

    Subclasses add their command tree in :meth:`_commands`.

    Parameters
    ----------
    idn
        The ``*IDN?`` answer (manufacturer, model, serial, firmware).
    faults
        Fault injection plan.
    clock
        Monotonic clock in s (tests may pass their own).
    """

    def __init__(self, idn: str, *, faults: Faults | None = None,
                 clock: Callable[[], float] = time.monotonic) -> None:
        self.idn = idn
        self.faults = faults or Faults()
        self.clock = clock
        self.lock = threading.RLock()
        self.errors: deque[tuple[int, str]] = deque()
        self.replies: deque[tuple[float, bytes]] = deque()
        self.busy_until = 0.0
        self.queries = 0
        self.fault_hits = 0
        self.dropped = False
        self.log: list[str] = []          # every unit received, for tests
        self.encoding = "ascii"
        self.byte_order = "big"
        self.reset()

    # ----- state -------------------------------------------------------------------
    def reset(self) -> None:
        """*RST: settings to defaults (the error queue is kept, as IEEE 488.2 says)."""
        self.encoding = "ascii"
        self.byte_order = "big"

    def push_error(self, code: int, detail: str = "") -> None:
        if len(self.errors) >= ERROR_QUEUE_LENGTH:
            # SCPI: the last entry is replaced by -350 when the queue overflows.
            self.errors[-1] = (-350, ERRORS[-350])
            return
        text = ERRORS.get(code, "Error")
        self.errors.append((code, f"{text};{detail}" if detail else text))

    # ----- transport side ------------------------------------------------------------
    def receive(self, message: str) -> None:
        """Process one program message (one or more ';'-separated units)."""
        with self.lock:
            if self.dropped:
                raise ConnectionResetError("simulated instrument dropped the connection")
            for unit in split_units(message):
                self._unit(unit)

    def take_reply(self) -> bytes | None:
        """The next reply whose time has come (without terminator), or None."""
        with self.lock:
            if self.dropped:
                raise ConnectionResetError("simulated instrument dropped the connection")
            if self.replies and self.replies[0][0] <= self.clock():
                return self.replies.popleft()[1]
            return None

    def _reply(self, data: bytes, *, at: float | None = None) -> None:
        self.replies.append((self.clock() if at is None else at, data))

    def _unit(self, unit: str) -> None:
        self.log.append(unit)
        msg = parse_unit(unit)
        hold = None
        if msg.query:
            self.queries += 1
            f = self.faults
            if f.drop_on_query == self.queries:
                self.dropped = True
                raise ConnectionResetError("simulated instrument dropped the connection")
            if f.timeout_on_query == self.queries:
                hold = f.late_reply_s
                if hold is None:
                    hold = float("inf")
        f = self.faults
        if f.error_on_header and header_matches(msg.header, f.error_on_header):
            self.fault_hits += 1
            if f.error_on_occurrence in (None, self.fault_hits):
                self.push_error(f.error_code, "injected fault")
        for pattern, is_query, handler in self._commands():
            if is_query == msg.query and header_matches(msg.header, pattern):
                n_before = len(self.replies)
                handler(msg)
                if hold is not None and len(self.replies) > n_before:
                    t, data = self.replies.pop()
                    if hold != float("inf"):
                        self.replies.append((max(t, self.clock()) + hold, data))
                elif (msg.query and self.faults.corrupt_block_on_query == self.queries
                      and len(self.replies) > n_before and self.replies[-1][1][:1] == b"#"):
                    t, data = self.replies.pop()
                    self.replies.append((t, data[:-4]))  # header now overstates the length
                return
        self.push_error(-113, msg.header)

    # ----- helpers for handlers --------------------------------------------------------
    def _number(self, msg: Message, lo: float, hi: float) -> float | None:
        if len(msg.params) != 1:
            self.push_error(-109 if not msg.params else -108, msg.header)
            return None
        try:
            v = float(msg.params[0])
        except ValueError:
            self.push_error(-104, msg.params[0])
            return None
        if not (lo <= v <= hi) or not np.isfinite(v):
            self.push_error(-222, f"{msg.header} {msg.params[0]}")
            return None
        return v

    def _values(self, values: np.ndarray) -> bytes:
        if self.encoding == "ascii":
            return encode_ascii(values)
        return build_block(values, self.encoding, self.byte_order)

    def _done_at(self) -> float:
        return max(self.busy_until, self.clock())

    # ----- command tree ----------------------------------------------------------------
    def _commands(self) -> list[tuple[str, bool, Callable[[Message], None]]]:
        return [
            ("*IDN", True, lambda m: self._reply(self.idn.encode())),
            ("*RST", False, lambda m: self.reset()),
            ("*CLS", False, lambda m: self.errors.clear()),
            ("*OPC", True, lambda m: self._reply(b"1", at=self._done_at())),
            ("*OPC", False, lambda m: None),
            ("*WAI", False, lambda m: None),
            ("*ESR", True, lambda m: self._reply(b"0")),
            ("SYSTem:ERRor[:NEXT]", True, self._error_next),
            ("FORMat[:DATA]", False, self._format),
            ("FORMat[:DATA]", True, lambda m: self._reply(self.encoding.upper().encode())),
            ("FORMat:BORDer", False, self._border),
        ]

    def _error_next(self, msg: Message) -> None:
        code, text = self.errors.popleft() if self.errors else (0, "No error")
        self._reply(f'{code},"{text}"'.encode())

    def _format(self, msg: Message) -> None:
        if not msg.params:
            self.push_error(-109, msg.header)
            return
        kind = msg.params[0]
        size = msg.params[1] if len(msg.params) > 1 else ""
        if keyword_matches(kind, "ASCii"):
            self.encoding = "ascii"
        elif keyword_matches(kind, "REAL") and size in ("32", "64", ""):
            self.encoding = "real" + (size or "64")
        elif keyword_matches(kind, "INTeger") and size in ("8", "16", "32", ""):
            self.encoding = "int" + (size or "16")
        else:
            self.push_error(-224, ",".join(msg.params))

    def _border(self, msg: Message) -> None:
        p = msg.params[0] if msg.params else ""
        if keyword_matches(p, "NORMal"):
            self.byte_order = "big"
        elif keyword_matches(p, "SWAPped"):
            self.byte_order = "little"
        else:
            self.push_error(-224 if p else -109, msg.header)


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
