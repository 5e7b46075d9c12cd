"""benchfit scope: read one scope channel over VISA and save it as a trace CSV."""

from __future__ import annotations

import argparse
import re

from benchfit.cli.common import add_json_flag, emit
from benchfit.cli.values import NON_NEGATIVE, VOLTAGE, output, text, value
from benchfit.errors import InputError
from benchfit.numfmt import eng
from benchfit.safety import CAUTION


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "scope", help="capture a scope channel over VISA into a trace CSV",
        description="Arm, trigger and read one channel with the commands of a scope profile, "
                    "scale it (time = first sample time + index x sample interval; volts = "
                    "code x volts per code + volts at code zero, or volts as sent) and save a "
                    "canonical trace CSV that 'benchfit step' reads. SCPI has no scope command "
                    "tree, so copy the generic-scope profile and edit it for your scope.",
        epilog=CAUTION)
    p.add_argument("resource", nargs="?", type=text, metavar="RESOURCE", help="VISA resource (not with --simulate)")
    p.add_argument("--profile", type=text, metavar="NAME|FILE", help="scope profile (default generic-scope with --simulate)")
    p.add_argument("--channel", type=text, default=None,
                   help="channel name for the profile's {channel} (default CH1; with --simulate the "
                        "--sim-channel when it is a CHn name, so the trace keeps the name it had)")
    p.add_argument("-o", "--output", required=True, type=output, metavar="TRACE.csv", help="trace CSV to write")
    p.add_argument("--no-trigger", action="store_true",
                   help="do not send the trigger command; wait for a real trigger")
    p.add_argument("--backend", type=text, default="@py", help="pyvisa backend (default @py)")
    sim = p.add_argument_group("simulation (no hardware)")
    sim.add_argument("--simulate", type=text, metavar="TRACE_FILE", help="replay a recorded trace as a simulated scope")
    sim.add_argument("--sim-channel", type=text, default=None, help="which channel of TRACE_FILE to replay")
    sim.add_argument("--noise", type=value(VOLTAGE, NON_NEGATIVE), default=0.0, help="rms noise in V added (default 0)")
    sim.add_argument("--transport", choices=("auto", "sim", "tcp"), default="auto",
                     help="sim: pyvisa-sim backend; tcp: pyvisa-py over a 127.0.0.1 socket")
    add_json_flag(p)
    p.set_defaults(func=run)


def _read_trace(path: str):
    try:
        from benchfit.data import read_trace

        return read_trace(path)
    except ImportError:  # the general reader is optional; canonical files always read
        from benchfit.data import read_canonical_trace

        return read_canonical_trace(path)


def replay_channel_name(sim_channel: str | None) -> str:
    """The channel name a simulated capture stores under: the replayed channel's own name when it
    is a scope channel name (CH1, CH2, ...), else CH1 (the profile's commands need such a name)."""
    if sim_channel and re.fullmatch(r"CH\d+", sim_channel.strip(), flags=re.IGNORECASE):
        return sim_channel.strip().upper()
    return "CH1"


def run(args: argparse.Namespace) -> int:
    from benchfit.bench.profile import find_profile
    from benchfit.bench.scope import capture_trace
    from benchfit.bench.sim_transport import bench_session
    from benchfit.bench.simscope import scope_for_trace

    if bool(args.simulate) == bool(args.resource):
        raise InputError("give exactly one of RESOURCE or --simulate", source="RESOURCE")
    if args.profile is None and not args.simulate:
        raise InputError("required with a real instrument (see 'benchfit profiles')", source="--profile")
    profile = find_profile(args.profile or "generic-scope", kind="scope")
    inst = None
    channel = args.channel or replay_channel_name(args.sim_channel if args.simulate else None)
    if args.simulate:
        inst = scope_for_trace(_read_trace(args.simulate), args.sim_channel, noise_v=args.noise,
                               channels=(channel.upper(),))
    resource = f"simulated:{args.simulate}" if inst is not None else args.resource
    with bench_session(profile, resource=args.resource, instrument=inst, transport=args.transport,
                       backend=args.backend) as session:
        trace = capture_trace(session, channel, out=args.output, resource=resource,
                              trigger=not args.no_trigger)
    sc = trace.meta["scaling"]
    emit(args, {"kind": "scope_capture", "output": args.output, "samples": len(trace),
                "channel": channel, "time_s": [float(trace.time_s[0]), float(trace.time_s[-1])],
                "meta": trace.meta},
         f"saved {len(trace)} samples of {channel} into {args.output} "
         + (f"(replaying {args.sim_channel or 'the first channel'} of {args.simulate}) " if args.simulate else "")
         + f"({eng(float(trace.time_s[0]), 's')} to {eng(float(trace.time_s[-1]), 's')}, "
         f"{eng(sc['sample_interval_s'], 's')} per sample)")
    return 0
