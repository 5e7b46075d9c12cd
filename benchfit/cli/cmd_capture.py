"""benchfit capture: measure a frequency response over VISA with standard SCPI."""

from __future__ import annotations

import argparse
import datetime as _dt
import sys

from benchfit.cli.common import add_json_flag, emit, warn
from benchfit.cli.values import (
    FREQUENCY,
    NON_NEGATIVE,
    NUMBER,
    SEED,
    TIME,
    VOLTAGE,
    Range,
    count,
    text,
    value,
)
from benchfit.errors import InputError

QUANTITY_CHOICES = ("plant", "loop", "closed", "impedance", "compensator", "unknown")
#: longest simulated measurement time per point, s (a longer one only makes a test hang)
MAX_SIM_POINT_S = 10.0


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "capture", help="capture a frequency response from an instrument (VISA, SCPI)",
        description="Configure a frequency-response analyzer with the commands of an instrument "
                    "profile, sweep (or step point by point), and save a canonical sweep CSV that "
                    "'benchfit fit' reads. Every finished segment is fsync'd to disk; --resume "
                    "continues an interrupted capture. With --simulate no hardware is needed.")
    p.add_argument("resource", nargs="?", type=text, metavar="RESOURCE",
                   help="VISA resource, e.g. TCPIP0::192.168.1.20::5025::SOCKET (not with --simulate)")
    p.add_argument("--profile", type=text, metavar="NAME|FILE",
                   help="instrument profile (default generic-analyzer with --simulate)")
    p.add_argument("--start", type=value(FREQUENCY), metavar="HZ", help="start frequency (SI prefixes allowed: 10, 1k)")
    p.add_argument("--stop", type=value(FREQUENCY), metavar="HZ", help="stop frequency")
    p.add_argument("--points", type=count(2), metavar="N", help="number of points")
    p.add_argument("--spacing", choices=("log", "lin"), default="log", help="grid spacing (default log)")
    p.add_argument("--level", type=value(VOLTAGE), metavar="V", help="source level in V")
    p.add_argument("--bandwidth", type=value(FREQUENCY), metavar="HZ", help="measurement bandwidth in Hz")
    p.add_argument("--mode", choices=("sweep", "step"), default="sweep",
                   help="sweep: instrument sweeps each segment; step: point by point (default sweep)")
    p.add_argument("--segment-points", type=count(0), default=0, metavar="N",
                   help="points per native sweep, each saved as it completes (default 0: one sweep)")
    p.add_argument("--quantity", choices=QUANTITY_CHOICES, default=None,
                   help="what is measured, written to the file header (default unknown, or the "
                        "simulated sweep's own)")
    p.add_argument("-o", "--output", type=text, metavar="OUT.csv", help="output CSV (default capture-<time>.csv)")
    p.add_argument("--resume", action="store_true", help="continue the capture in -o OUT.csv")
    p.add_argument("--backend", type=text, default="@py", help="pyvisa backend (default @py, pure Python)")
    p.add_argument("--no-progress", action="store_true", help="no progress bar on stderr")
    sim = p.add_argument_group("simulation (no hardware)")
    sim.add_argument("--simulate", type=text, metavar="PLANT_FILE",
                     help="answer from a simulated instrument built from a sweep file or a model JSON")
    sim.add_argument("--noise", type=value(NUMBER, NON_NEGATIVE), default=1e-3, help="relative rms noise (default 1e-3)")
    sim.add_argument("--sim-point-time", type=value(TIME, Range(ge=0, le=MAX_SIM_POINT_S)), default=2e-4,
                     metavar="S",
                     help="simulated measurement time per point in s (default 2e-4)")
    sim.add_argument("--seed", type=SEED, default=0, help="noise seed (default 0)")
    sim.add_argument("--transport", choices=("auto", "sim", "tcp"), default="auto",
                     help="sim: pyvisa-sim backend; tcp: pyvisa-py over a 127.0.0.1 socket")
    add_json_flag(p)
    p.set_defaults(func=run)


def simulated_instrument(path: str, args: argparse.Namespace):
    """The simulated analyzer for --simulate, and the sweep it was built from (or None)."""
    from benchfit.bench.simulator import SimulatedAnalyzer, analyzer_for_sweep

    opts = {"noise": args.noise, "seed": args.seed, "time_per_point_s": args.sim_point_time}
    if str(path).lower().endswith(".json"):
        from benchfit.fitting.model import PlantModel

        return SimulatedAnalyzer(PlantModel.from_json(path).response, **opts), None
    try:
        from benchfit.data import read_sweep

        resp = read_sweep(path)
    except ImportError:  # the general reader is optional; canonical files always read
        from benchfit.data import read_canonical_sweep

        resp = read_canonical_sweep(path)
    return analyzer_for_sweep(resp, **opts), resp


def _settings(args: argparse.Namespace, sweep):
    from benchfit.bench.capture import CaptureSettings

    def freq(given, option, default):
        if given is not None:
            return given
        if default is None:
            raise InputError("required (or use --simulate with a sweep file)", source=option)
        return default

    start = freq(args.start, "--start", sweep.f_min_hz if sweep is not None else None)
    stop = freq(args.stop, "--stop", sweep.f_max_hz if sweep is not None else None)
    points = args.points if args.points is not None else (min(len(sweep), 201) if sweep is not None else None)
    if points is None:
        raise InputError("required", source="--points")
    return CaptureSettings(
        start_hz=start, stop_hz=stop, points=points, spacing=args.spacing,
        level_v=args.level, bandwidth_hz=args.bandwidth,
        mode=args.mode, segment_points=args.segment_points,
        quantity=args.quantity or (sweep.quantity if sweep is not None else "unknown"))


def run(args: argparse.Namespace) -> int:
    from benchfit.bench.capture import run_capture
    from benchfit.bench.profile import find_profile
    from benchfit.bench.progress import ProgressBar
    from benchfit.bench.sim_transport import bench_session

    if args.simulate and args.resource:
        raise InputError("give either RESOURCE or --simulate, not both", source="RESOURCE")
    if not args.simulate and not args.resource:
        raise InputError("missing: name a VISA resource (see 'benchfit instruments') or use --simulate",
                         source="RESOURCE")
    if args.resume and not args.output:
        raise InputError("--resume needs -o with the file to continue", source="--resume")
    if args.profile is None and not args.simulate:
        raise InputError("required with a real instrument (see 'benchfit profiles')", source="--profile")
    profile = find_profile(args.profile or "generic-analyzer", kind="analyzer")
    inst, sweep = simulated_instrument(args.simulate, args) if args.simulate else (None, None)
    settings = _settings(args, sweep)
    settings.validate()
    out = args.output or f"capture-{_dt.datetime.now(_dt.UTC).strftime('%Y%m%d-%H%M%S')}.csv"
    bar = ProgressBar(settings.points) if not args.no_progress else None
    resource = f"simulated:{args.simulate}" if inst is not None else args.resource
    with bench_session(profile, resource=args.resource, instrument=inst, transport=args.transport,
                       backend=args.backend) as session:
        try:
            result = run_capture(session, settings, out, resume=args.resume, resource=resource,
                                 progress=bar)
        finally:
            if bar is not None:
                bar.close()
    for w in result.warnings:
        warn(w)
    emit(args, result.to_dict(), result.summary())
    if not result.complete:
        print(f"benchfit: {result.summary()}", file=sys.stderr)
        return 130
    return 0
