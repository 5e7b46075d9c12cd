"""The instrument steps every capture shares: preparing the instrument, and one point measured
at a fixed (CW) frequency, the reading both the step-mode capture and the adaptive capture's
probe make.

:func:`prepare_instrument` clears the status, optionally resets, drains stale
errors and sets the data format.  :func:`read_cw_point` sets the CW frequency, then per reading trigger,
wait for ``*OPC?`` and read the error queue (only after the wait: an instrument
that runs commands in sequence would hold a ``SYSTem:ERRor?`` sent mid-sweep
until the sweep ends), read back the frequency when the profile can ask for it,
and read the data, which must be one finite point.
"""

from __future__ import annotations

import numpy as np

from benchfit.bench.blocks import parse_ascii
from benchfit.bench.profile import Profile
from benchfit.bench.session import Session
from benchfit.errors import InstrumentError


def to_complex(values: np.ndarray, form: str, *, what: str = "data") -> np.ndarray:
    """Interleaved pairs per point -> complex response.

    ``re_im``: real, imaginary; ``db_deg``: 20·log10|H| in dB, phase in deg;
    ``lin_deg``: |H|, phase in deg.
    """
    v = np.asarray(values, dtype=float)
    if v.size % 2:
        raise InstrumentError(f"{what}: {v.size} values, expected pairs (two per point)")
    a, b = v[0::2], v[1::2]
    if form == "re_im":
        return a + 1j * b
    mag = 10.0 ** (a / 20.0) if form == "db_deg" else a
    return mag * np.exp(1j * np.radians(b))


def prepare_instrument(session: Session, profile: Profile, *, reset: bool = False
                       ) -> list[tuple[int, str]]:
    """Clear the status (and ``*RST`` when ``reset``), drain stale errors, set the data format
    and byte order; returns the stale error-queue entries (they are from before this capture)."""
    ses, p = session, profile
    if p.has("clear_status"):
        ses.write(p.command("clear_status"))
    if reset and p.has("reset"):
        ses.write(p.command("reset"))
    stale = ses.drain_errors()
    if p.has(f"format_{p.encoding}"):
        ses.configure(p.command(f"format_{p.encoding}"))
    if p.is_binary and p.has(f"byte_order_{p.byte_order}"):
        ses.configure(p.command(f"byte_order_{p.byte_order}"))
    return list(stale)


def trigger_and_wait(session: Session, profile: Profile) -> None:
    """Trigger one measurement, wait until it is done, then check the error queue."""
    cmd = profile.command("trigger")
    session.write(cmd)
    session.wait_complete()
    session.check_errors(cmd)


def read_cw_point(session: Session, profile: Profile, freq_hz: float, repeats: int = 1
                  ) -> tuple[float, np.ndarray]:
    """Measure ``repeats`` readings at ``freq_hz``; returns (the frequency, the readings).

    The frequency is the instrument's own (``cw_query``, read once, after the
    first reading) when the profile has that query, else the one asked for.
    Level and bandwidth are whatever the session is set to.

    Raises
    ------
    InstrumentError
        When a reading is not exactly one finite point.
    """
    ses, p = session, profile
    ses.configure(p.command("cw", freq_hz=float(freq_hz)))
    f_read = float(freq_hz)
    data_cmd = p.command("data_query")
    values = []
    for k in range(max(int(repeats), 1)):
        trigger_and_wait(ses, p)
        if k == 0 and p.has("cw_query"):
            cmd = p.command("cw_query")
            f_read = float(parse_ascii(ses.query(cmd), what=cmd)[0])
        h = to_complex(ses.query_values(data_cmd), p.response_form, what=data_cmd)
        if h.size != 1 or not np.isfinite(h[0]):
            raise InstrumentError(f"expected one finite point, the instrument returned {h}",
                                  resource=ses.name, command=data_cmd)
        values.append(complex(h[0]))
    return f_read, np.asarray(values, complex)
