"""Put a simulated instrument behind a real VISA code path.

Two ways, both ending in a genuine pyvisa resource:

* :func:`sim_resource_manager` + :func:`attach_to_pyvisa_sim`: the simulator
  registered as a device of pyvisa-sim (a pyvisa backend), so every byte goes
  through pyvisa's message-based resource code.  pyvisa-sim caches its
  definition per file path, so each caller gets its own file in its own folder.
* :class:`LoopbackServer`: the simulator served on a TCP socket bound to a
  loopback address only, bounded in connections and lifetime, so pyvisa-py's
  real ``TCPIP::...::SOCKET`` transport is exercised with no hardware.
"""

from __future__ import annotations

import ipaddress
import os
import select
import socket
import tempfile
import threading
import time
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

from benchfit.bench.profile import Profile
from benchfit.bench.scpidevice import ScpiDevice
from benchfit.bench.session import Session, open_session
from benchfit.errors import InputError

_SIM_YAML = 'spec: "1.1"\nresources: {}\ndevices: {}\n'


def sim_resource_manager(folder: str | os.PathLike) -> Any:
    """A pyvisa ResourceManager on the pyvisa-sim backend with an empty definition file.

    The file is written into ``folder`` (use a fresh folder per test or run).

    Raises
    ------
    InputError
        When pyvisa-sim is not installed (``pip install 'benchfit[sim]'``).
    """
    try:
        import pyvisa_sim  # noqa: F401
    except ImportError:
        raise InputError("the pyvisa-sim backend is not installed; install benchfit[sim] or use "
                         "the loopback transport", source="--transport") from None
    import pyvisa

    path = Path(folder) / "benchfit-sim.yaml"
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(_SIM_YAML, encoding="utf-8")
    return pyvisa.ResourceManager(f"{path}@sim")


def _bridge_class():
    from pyvisa_sim.devices import Device

    class SimBridge(Device):
        """A pyvisa-sim device whose answers come from a :class:`ScpiDevice`."""

        def __init__(self, instrument: ScpiDevice, termination: bytes) -> None:
            super().__init__("benchfit-simulator", delimiter=b"")
            self.instrument = instrument
            term = termination.decode("latin-1")
            for tc in ("TCPIP INSTR", "TCPIP SOCKET", "GPIB INSTR", "USB INSTR", "ASRL INSTR"):
                self.add_eom(tc, term, term)
            self._pending = bytearray()

        def write(self, data: bytes) -> None:
            self._input_buffer.extend(data)
            eom = self._query_eom
            if not self._input_buffer.endswith(eom):
                return
            message = bytes(self._input_buffer[: len(self._input_buffer) - len(eom)])
            self._input_buffer = bytearray()
            self.instrument.receive(message.decode("latin-1"))

        def read(self) -> tuple[bytes, bool]:
            if not self._pending:
                reply = self.instrument.take_reply()
                if reply is None:
                    return b"", False
                self._pending = bytearray(reply + self._response_eom)
            b = bytes(self._pending[:1])
            del self._pending[:1]
            return b, not self._pending

    return SimBridge


def attach_to_pyvisa_sim(rm: Any, resource_name: str, instrument: ScpiDevice, *,
                         termination: bytes = b"\n") -> str:
    """Register ``instrument`` under ``resource_name`` in a pyvisa-sim resource manager.

    Returns
    -------
    str
        The canonical resource name to open.
    """
    from pyvisa.rname import to_canonical_name

    name = to_canonical_name(resource_name)
    rm.visalib.devices.add_device(name, _bridge_class()(instrument, termination))
    return name


class LoopbackServer:
    """Serve a simulated instrument on ``127.0.0.1`` for pyvisa-py's SOCKET transport.

    Parameters
    ----------
    instrument
        The simulated instrument.
    host
        A loopback address; anything else is refused.
    port
        TCP port, 0 for any free one (see :attr:`port`).
    termination
        Message terminator both ways.
    lifetime_s
        The server stops by itself after this long.
    max_connections
        Connections accepted in total; later ones are closed at once.
    """

    def __init__(self, instrument: ScpiDevice, *, host: str = "127.0.0.1", port: int = 0,
                 termination: bytes = b"\n", lifetime_s: float = 600.0, max_connections: int = 16) -> None:
        if not ipaddress.ip_address(host).is_loopback:
            raise InputError(f"{host} is not a loopback address; the simulator serves only on "
                             "127.0.0.0/8 or ::1", source="host")
        self.instrument = instrument
        self.termination = termination
        self.lifetime_s = float(lifetime_s)
        self.max_connections = int(max_connections)
        fam = socket.AF_INET6 if ":" in host else socket.AF_INET
        self._listener = socket.socket(fam, socket.SOCK_STREAM)
        self._listener.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        self._listener.bind((host, port))
        self._listener.listen(4)
        self.host = host
        self.port = self._listener.getsockname()[1]
        self.connections = 0
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._run, name="benchfit-loopback", daemon=True)

    @property
    def resource_name(self) -> str:
        return f"TCPIP0::{self.host}::{self.port}::SOCKET"

    def start(self) -> LoopbackServer:
        self._thread.start()
        return self

    def stop(self) -> None:
        self._stop.set()
        if self._thread.is_alive():
            self._thread.join(timeout=5)
        self._listener.close()

    def __enter__(self) -> LoopbackServer:
        return self.start()

    def __exit__(self, *exc) -> None:
        self.stop()

    def _run(self) -> None:
        deadline = time.monotonic() + self.lifetime_s
        clients: dict[socket.socket, bytearray] = {}
        term = self.termination
        try:
            while not self._stop.is_set() and time.monotonic() < deadline:
                readable, _, _ = select.select([self._listener, *clients], [], [], 0.005)
                for s in readable:
                    if s is self._listener:
                        conn, _ = s.accept()
                        self.connections += 1
                        if self.connections > self.max_connections or self.instrument.dropped:
                            conn.close()
                        else:
                            conn.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
                            clients[conn] = bytearray()
                        continue
                    if s not in clients:
                        continue
                    try:
                        data = s.recv(65536)
                    except OSError:
                        data = b""
                    if not data:
                        clients.pop(s, None)
                        s.close()
                        continue
                    buf = clients[s]
                    buf.extend(data)
                    while term in buf:
                        i = buf.index(term)
                        msg = bytes(buf[:i])
                        del buf[: i + len(term)]
                        try:
                            self.instrument.receive(msg.decode("latin-1"))
                        except ConnectionResetError:
                            self._drop(clients)
                            break
                for s in list(clients):
                    try:
                        while (reply := self.instrument.take_reply()) is not None:
                            s.sendall(reply + term)
                    except ConnectionResetError:
                        self._drop(clients)
                    except OSError:
                        clients.pop(s, None)
                        s.close()
        finally:
            for s in clients:
                s.close()

    @staticmethod
    def _drop(clients: dict) -> None:
        for s in list(clients):
            try:
                s.shutdown(socket.SHUT_RDWR)
            except OSError:
                pass
            s.close()
        clients.clear()


@contextmanager
def simulated_session(instrument: ScpiDevice, profile: Profile, *, transport: str = "sim",
                      folder: str | os.PathLike | None = None) -> Iterator[Session]:
    """Open a :class:`Session` on ``instrument`` through a real VISA code path.

    Parameters
    ----------
    transport
        ``"sim"``: pyvisa-sim backend (definition file written into ``folder``,
        a fresh temporary folder when None); ``"tcp"``: pyvisa-py over a
        :class:`LoopbackServer` on 127.0.0.1.
    """
    term = profile.read_termination.encode("latin-1") or b"\n"
    if transport == "sim":
        with tempfile.TemporaryDirectory(prefix="benchfit-sim-") as tmp:
            rm = sim_resource_manager(folder or tmp)
            name = attach_to_pyvisa_sim(rm, "TCPIP0::simulated::inst0::INSTR", instrument,
                                        termination=term)
            session = open_session(name, profile, resource_manager=rm)
            try:
                yield session
            finally:
                session.close()
    elif transport == "tcp":
        with LoopbackServer(instrument, termination=term) as server:
            session = open_session(server.resource_name, profile, backend="@py")
            try:
                yield session
            finally:
                session.close()
    else:
        raise InputError(f"{transport!r}: expected sim or tcp", source="--transport")


def default_transport() -> str:
    """``"sim"`` when pyvisa-sim is installed, else ``"tcp"`` (pyvisa-py over loopback)."""
    try:
        import pyvisa_sim  # noqa: F401
    except ImportError:
        return "tcp"
    return "sim"


@contextmanager
def bench_session(profile: Profile, *, resource: str | None = None,
                  instrument: ScpiDevice | None = None, transport: str = "auto",
                  backend: str = "@py") -> Iterator[Session]:
    """A session on a real ``resource`` or, when ``instrument`` is given, on the simulator.

    ``transport`` (``auto``, ``sim``, ``tcp``) applies to the simulator only.
    """
    if instrument is not None:
        chosen = default_transport() if transport == "auto" else transport
        with simulated_session(instrument, profile, transport=chosen) as s:
            yield s
    else:
        with open_session(str(resource), profile, backend=backend) as s:
            yield s
