"""A VISA session that speaks a profile: retries, resynchronisation, error queue.

Works on any object with pyvisa's message-based resource methods
(``write``, ``read_raw``, ``read_bytes``, ``timeout`` in ms, ``close``); in
practice a pyvisa resource opened on the pure-Python ``@py`` backend, or on
pyvisa-sim for tests.

Two bench facts shape it:

* pyvisa-py reads a reply that arrives after a timeout as the answer to the
  next query.  So after a timeout the session *resynchronises*: it sends
  the identify query and discards replies until the identity comes back,
  then retries.  Only timeouts and malformed replies are retried.
* Instruments report bad commands on the SCPI error queue, not in-band.  So
  every configuration step is followed by draining ``SYSTem:ERRor?`` until
  it answers 0, and any entry becomes an :class:`InstrumentError` naming
  the command.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from benchfit.bench.blocks import MalformedReply, block_header, parse_ascii, parse_block
from benchfit.bench.profile import Profile
from benchfit.errors import InputError, InstrumentError

MAX_ERROR_ENTRIES = 64     # stop draining a queue that never empties
MAX_RESYNC_DISCARDS = 64   # stale replies discarded while resynchronising


class _Timeout(Exception):
    pass


def _classify(exc: BaseException) -> str | None:
    """'timeout', 'lost', or None for exceptions that are not I/O failures."""
    try:
        from pyvisa import constants, errors
    except ImportError:  # pragma: no cover - pyvisa is a dependency
        errors = constants = None
    if isinstance(exc, TimeoutError):
        return "timeout"
    if errors is not None and isinstance(exc, errors.VisaIOError):
        return "timeout" if exc.error_code == constants.StatusCode.error_timeout else "lost"
    if errors is not None and isinstance(exc, errors.InvalidSession):
        return "lost"
    if isinstance(exc, (ConnectionError, OSError, EOFError)):
        return "lost"
    return None


class Session:
    """An open instrument speaking one profile.

    Parameters
    ----------
    resource
        A pyvisa message-based resource (or an object with the same methods).
    profile
        The instrument profile (terminations, timeout, retries, encoding).
    name
        Resource name for messages.
    """

    def __init__(self, resource: Any, profile: Profile, *, name: str = "instrument") -> None:
        self.resource = resource
        self.profile = profile
        self.name = name
        self.idn: str | None = None
        self.timeouts = 0
        self.resyncs = 0
        self.malformed = 0
        try:
            resource.timeout = profile.timeout_s * 1000.0
            resource.read_termination = profile.read_termination
            resource.write_termination = profile.write_termination
        except AttributeError:
            pass

    # ----- raw I/O ------------------------------------------------------------------
    def _io(self, fn, command: str):
        try:
            return fn()
        except Exception as e:  # noqa: BLE001 - classified below, others re-raised
            kind = _classify(e)
            if kind == "timeout":
                self.timeouts += 1
                raise _Timeout() from e
            if kind == "lost":
                raise InstrumentError(f"connection lost or refused ({type(e).__name__}: {e})",
                                      resource=self.name, command=command) from None
            raise

    def write(self, command: str) -> None:
        """Send one command (no error check; see :meth:`configure`)."""
        self._io(lambda: self.resource.write(command), command)

    def _read_line(self, command: str) -> str:
        raw = self._io(lambda: self.resource.read_raw(), command)
        return bytes(raw).decode("latin-1").rstrip("\r\n").rstrip(self.profile.read_termination)

    def _read_block(self, command: str, encoding: str) -> np.ndarray:
        rd = self.resource.read_bytes
        head = self._io(lambda: rd(2), command)
        if head[:1] != b"#":
            rest = self._io(lambda: self.resource.read_raw(), command) if not head.endswith(b"\n") else b""
            block_header(head + rest, what=command)  # raises MalformedReply with what arrived
        nd = int(chr(head[1])) if chr(head[1]).isdigit() else 0
        digits = self._io(lambda: rd(nd), command) if nd else b""
        _, n = block_header(head + digits, what=command)
        payload = self._io(lambda: rd(n), command)
        term = self.profile.read_termination.encode("latin-1")
        tail = self._io(lambda: rd(len(term), break_on_termchar=True), command) if term else b""
        return parse_block(head + digits + payload + tail, encoding,
                           self.profile.byte_order, what=command, terminator=term)

    # ----- retried queries --------------------------------------------------------------
    def _retried(self, command: str, read):
        tries = self.profile.retries + 1
        why = ""
        for attempt in range(tries):
            try:
                self.write(command)
                return read()
            except _Timeout:
                why = f"no answer within {self._timeout_s():g} s"
            except MalformedReply as e:
                self.malformed += 1
                why = str(e)
            if attempt + 1 < tries:
                self.resync(command)
        raise InstrumentError(f"{why} (tried {tries} times){self._queued_errors(command)}",
                              resource=self.name, command=command)

    def _queued_errors(self, command: str) -> str:
        """After a failed query, what the error queue says about it (often the real cause)."""
        if command == self.profile.commands.get("error_query"):
            return ""
        try:
            errs = self.drain_errors()
        except InstrumentError:
            return ""
        listed = "; ".join(f"{c} {t}" for c, t in errs)
        return f"; instrument reported: {listed}" if errs else ""

    def _timeout_s(self) -> float:
        try:
            return float(self.resource.timeout) / 1000.0
        except (AttributeError, TypeError, ValueError):
            return self.profile.timeout_s

    def query(self, command: str) -> str:
        """Send a query and return its text answer; timeouts are retried after a resync."""
        return self._retried(command, lambda: self._read_line(command))

    def query_values(self, command: str, *, encoding: str | None = None) -> np.ndarray:
        """Send a data query and decode the reply (ASCII list or binary block per profile)."""
        enc = encoding or self.profile.encoding
        if enc == "ascii":
            return self._retried(command, lambda: parse_ascii(self._read_line(command), what=command))
        return self._retried(command, lambda: self._read_block(command, enc))

    def resync(self, after: str = "") -> None:
        """After a timeout: send the identify query and discard replies until it answers.

        Raises
        ------
        InstrumentError
            When the instrument does not answer the identify query at all.
        """
        self.resyncs += 1
        idn_cmd = self.profile.command("identify")
        try:
            self.write(idn_cmd)
            for _ in range(MAX_RESYNC_DISCARDS):
                line = self._read_line(idn_cmd)
                if self.idn is not None and line.strip() == self.idn:
                    return
                if self.idn is None and line.count(",") >= 3 and not line.startswith("#"):
                    return
        except _Timeout:
            raise InstrumentError("instrument stopped answering (no reply to the identify query "
                                  "sent to resynchronise; the connection may be lost)", resource=self.name,
                                  command=after or idn_cmd) from None
        raise InstrumentError(f"could not resynchronise: {MAX_RESYNC_DISCARDS} stale replies",
                              resource=self.name, command=after or idn_cmd)

    # ----- error queue ----------------------------------------------------------------
    def drain_errors(self) -> list[tuple[int, str]]:
        """Read the error queue until it reports 0; return the entries (code, text)."""
        cmd = self.profile.command("error_query")
        out = []
        for _ in range(MAX_ERROR_ENTRIES):
            line = self.query(cmd).strip()
            code_text, _, text = line.partition(",")
            try:
                code = int(code_text.strip().lstrip("+"))
            except ValueError:
                raise MalformedReply(f"error queue answer {line[:60]!r}: expected <code>,\"<text>\"",
                                     resource=self.name, command=cmd) from None
            if code == 0:
                return out
            out.append((code, text.strip().strip('"')))
        return out

    def check_errors(self, after: str) -> None:
        """Drain the error queue; raise naming ``after`` when it held anything."""
        errs = self.drain_errors()
        if errs:
            listed = "; ".join(f"{c} {t}" for c, t in errs)
            raise InstrumentError(f"instrument reported: {listed}", resource=self.name, command=after)

    def configure(self, command: str) -> None:
        """Send a setting and check the error queue right after it."""
        self.write(command)
        self.check_errors(command)

    # ----- conveniences ----------------------------------------------------------------
    def identify(self) -> str:
        """Ask the identify query; remembers the answer for resynchronisation."""
        self.idn = self.query(self.profile.command("identify")).strip()
        return self.idn

    def wait_complete(self) -> None:
        """Block on the operation-complete query (``*OPC?`` answers 1 when done).

        Uses the profile's ``complete_timeout_s`` (a whole sweep or record) when set.
        """
        cmd = self.profile.command("operation_complete")
        if self.profile.complete_timeout_s is not None:
            self.resource.timeout = self.profile.complete_timeout_s * 1000.0
        try:
            ans = self.query(cmd).strip()
        except InstrumentError as e:
            if "connection lost" in str(e):
                raise
            raise InstrumentError(f"{e}; the operation did not complete in time: check the trigger, "
                                  "or set connection.complete_timeout_s above the sweep or record "
                                  "time") from None
        finally:
            self.resource.timeout = self.profile.timeout_s * 1000.0
        if ans.lstrip("+") not in ("1", "1.0"):
            raise MalformedReply(f"operation-complete answer {ans[:20]!r}, expected 1",
                                 resource=self.name, command=cmd)

    def stats(self) -> dict[str, int]:
        return {"timeouts": self.timeouts, "resyncs": self.resyncs, "malformed": self.malformed}

    def close(self) -> None:
        try:
            self.resource.close()
        except Exception:  # noqa: BLE001 - closing a dead link must not hide the real error
            pass

    def __enter__(self) -> Session:
        return self

    def __exit__(self, *exc) -> None:
        self.close()


def open_session(resource_name: str, profile: Profile, *, backend: str | None = None,
                 resource_manager: Any = None) -> Session:
    """Open ``resource_name`` with pyvisa (default backend ``@py``) and wrap it.

    Raises
    ------
    InstrumentError
        When the resource cannot be opened.
    InputError
        When the backend is unknown or not installed.
    """
    import pyvisa

    rm = resource_manager
    if rm is None:
        try:
            rm = pyvisa.ResourceManager(backend or "@py")
        except (ValueError, OSError, pyvisa.errors.LibraryError) as e:
            raise InputError(f"cannot load VISA backend {backend or '@py'!r}: {e}", source="--backend") from None
    try:
        res = rm.open_resource(resource_name, read_termination=profile.read_termination,
                               write_termination=profile.write_termination,
                               timeout=profile.timeout_s * 1000.0)
    except (pyvisa.errors.VisaIOError, ValueError, OSError) as e:
        raise InstrumentError(f"cannot open: {e}", resource=resource_name) from None
    if resource_name.upper().endswith("::SOCKET"):
        _no_delay(res)
    return Session(res, profile, name=resource_name)


def _no_delay(res: Any) -> None:
    """Turn off Nagle's algorithm on a raw-socket resource.

    A command followed at once by ``SYSTem:ERRor?`` is two small sends; with
    Nagle's algorithm the second waits for the first one's (delayed) ACK, tens
    of ms per command.  pyvisa-py 0.8 does not accept VI_ATTR_TCPIP_NODELAY on
    SOCKET resources (its setter is not wired), so set the option on its socket.
    """
    import socket

    try:
        sock = res.visalib.sessions[res.session].interface
        sock.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
    except (AttributeError, KeyError, OSError, TypeError):
        pass  # another backend: leave its socket as it is
