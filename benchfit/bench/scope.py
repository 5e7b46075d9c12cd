"""Scope capture: arm, trigger, read one channel's waveform and its scaling.

SCPI-1999 has no oscilloscope command tree, so every command comes from a
scope profile.  The scaling convention is the common one::

    time_s = x_origin + index * x_increment
    volts  = (code - y_reference) * y_increment + y_origin

The result is a :class:`benchfit.data.TimeTrace`, optionally written as a
canonical trace CSV the step tools read.
"""

from __future__ import annotations

import datetime as _dt
import os

import numpy as np

from benchfit.bench.blocks import MalformedReply
from benchfit.bench.session import Session
from benchfit.data.canonical import write_trace_csv
from benchfit.data.trace import TimeTrace
from benchfit.errors import InputError, InstrumentError
from benchfit.provenance import Provenance


def _number(session: Session, key: str, channel: str) -> float:
    cmd = session.profile.command(key, channel=channel)
    text = session.query(cmd).strip()
    try:
        v = float(text)
    except ValueError:
        raise MalformedReply(f"answer {text[:30]!r}: expected a number", resource=session.name,
                             command=cmd) from None
    if not np.isfinite(v):
        raise InstrumentError(f"answer {text!r} is not finite", resource=session.name, command=cmd)
    return v


def capture_trace(session: Session, channel: str = "CH1", *, out: str | os.PathLike | None = None,
                  resource: str = "", trigger: bool = True) -> TimeTrace:
    """Arm, trigger, wait and read one channel; return (and optionally save) the trace.

    Parameters
    ----------
    session
        An open session with a scope profile.
    channel
        Channel name as the profile's ``{channel}`` placeholder expects it.
    out
        Canonical trace CSV to write (atomically), or None.
    resource
        Resource name recorded in the trace.
    trigger
        Send the profile's ``trigger`` command (off: wait for a real trigger).

    Raises
    ------
    InstrumentError
        Instrument errors (naming the command), timeouts, bad scaling.
    """
    p = session.profile
    if p.kind != "scope":
        raise InputError(f"profile {p.name!r} is a {p.kind} profile; expected a scope profile",
                         source="--profile")
    idn = session.identify()
    if p.has("clear_status"):
        session.write(p.command("clear_status", channel=channel))
    session.drain_errors()
    fmt = f"format_{p.encoding}"
    if p.has(fmt):
        session.configure(p.command(fmt, channel=channel))
    if p.is_binary and p.has(f"byte_order_{p.byte_order}"):
        session.configure(p.command(f"byte_order_{p.byte_order}", channel=channel))
    if p.has("select"):
        session.configure(p.command("select", channel=channel))
    # Errors are read after *OPC? answers (see capture): a scope that runs commands in
    # sequence would hold an error query sent while it waits for the trigger.
    sent = [p.command("arm", channel=channel)]
    if trigger and p.has("trigger"):
        sent.append(p.command("trigger", channel=channel))
    for cmd in sent:
        session.write(cmd)
    session.wait_complete()
    session.check_errors("; ".join(sent))
    xinc = _number(session, "x_increment", channel)
    xorg = _number(session, "x_origin", channel)
    yinc = _number(session, "y_increment", channel)
    yorg = _number(session, "y_origin", channel)
    yref = _number(session, "y_reference", channel) if p.has("y_reference") else 0.0
    data_cmd = p.command("data_query", channel=channel)
    codes = session.query_values(data_cmd)
    session.check_errors("end of scope capture")
    if xinc <= 0:
        raise InstrumentError(f"x increment {xinc} s: expected a positive sample interval",
                              resource=session.name, command=p.command("x_increment", channel=channel))
    if codes.size < 2:
        raise InstrumentError(f"{codes.size} samples; expected at least 2", resource=session.name,
                              command=data_cmd)
    t = xorg + np.arange(codes.size) * xinc
    v = (codes.astype(float) - yref) * yinc + yorg
    scaling = {"x_increment_s": xinc, "x_origin_s": xorg, "y_increment_v": yinc,
               "y_origin_v": yorg, "y_reference": yref}
    trace = TimeTrace(
        time_s=t, channels={channel: v},
        meta={"instrument": idn, "profile": p.name, "resource": resource or session.name,
              "channel": channel, "scaling": scaling,
              "capture_time": _dt.datetime.now(_dt.UTC).isoformat(timespec="seconds")},
        provenance=Provenance(step="scope_capture", sources=(resource or session.name,),
                              settings={"profile": p.name, "channel": channel, **scaling}),
    )
    if out is not None:
        write_trace_csv(trace, out)
    return trace
