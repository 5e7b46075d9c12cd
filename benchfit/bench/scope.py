"""Scope capture: arm, trigger, read one channel's waveform and its scaling.

SCPI-1999 has no oscilloscope command tree, so every command comes from a
scope profile.  The trace is built in benchfit's own terms::

    time_s = first_sample_time + index * sample_interval
    volts  = code * volts_per_code + volts_at_code_zero

A profile whose data query returns volts already (``real32``, ``real64`` or
``ascii`` encodings) needs no code scaling: ``volts_per_code`` and
``volts_at_code_zero`` are then left out (1 and 0).  Without a
``first_sample_time`` query the first sample is at t = 0.

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
    dt = _number(session, "sample_interval", channel)
    t0 = _number(session, "first_sample_time", channel) if p.has("first_sample_time") else 0.0
    per_code = _number(session, "volts_per_code", channel) if p.has("volts_per_code") else None
    at_zero = (_number(session, "volts_at_code_zero", channel)
               if p.has("volts_at_code_zero") else 0.0)
    data_cmd = p.command("data_query", channel=channel)
    codes = session.query_values(data_cmd)
    session.check_errors("end of scope capture")
    if dt <= 0:
        raise InstrumentError(f"sample interval {dt} s: expected a positive number",
                              resource=session.name, command=p.command("sample_interval", channel=channel))
    if codes.size < 2:
        raise InstrumentError(f"{codes.size} samples; expected at least 2", resource=session.name,
                              command=data_cmd)
    t = t0 + np.arange(codes.size) * dt
    v = codes.astype(float) * (1.0 if per_code is None else per_code) + at_zero
    scaling = {"sample_interval_s": dt, "first_sample_time_s": t0,
               "volts_per_code": per_code, "volts_at_code_zero": at_zero}
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
