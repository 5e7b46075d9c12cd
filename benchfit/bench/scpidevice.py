"""The SCPI side of a simulated instrument: IEEE 488.2 common commands, the error queue,
output timing and injected faults.

:class:`ScpiDevice` answers ``*IDN?``, ``*RST``, ``*CLS``, ``*OPC``/``*OPC?``,
``*WAI``, ``*ESR?``, ``SYSTem:ERRor?`` and the ``FORMat`` commands; subclasses
(:class:`~benchfit.bench.simulator.SimulatedAnalyzer`,
:class:`~benchfit.bench.simscope.SimulatedScope`) add their command trees.
Replies become readable only when their time has come (a sweep or a record
takes time).  :class:`Faults` lets tests time out the Nth query, drop the
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
