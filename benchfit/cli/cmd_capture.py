"""benchfit capture: measure a frequency response over VISA with standard SCPI."""

from __future__ import annotations

import argparse
import datetime as _dt
import sys
import time

from benchfit.cli.common import add_json_flag, emit, warn
from benchfit.cli.values import (
    ANGLE,
    DECIBEL,
    FREQUENCY,
    NON_NEGATIVE,
    NUMBER,
    SEED,
    TIME,
    VOLTAGE,
    Range,
    count,
    output,
    text,
    value,
)
from benchfit.errors import InputError
from benchfit.safety import CAUTION

QUANTITY_CHOICES = ("plant", "loop", "closed", "impedance", "compensator", "unknown")
#: longest simulated measurement time per point, s (a longer one only makes a test hang)
MAX_SIM_POINT_S = 10.0


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "capture", help="capture a frequency response from an instrument (VISA, SCPI)",
        description="Configure a frequency-response analyzer with the commands of an instrument "
                    "profile, sweep (or step point by point), and save a canonical sweep CSV that "
                    "'benchfit fit' reads. Every finished segment is fsync'd to disk; --resume "
                    "continues an interrupted capture. With --simulate no hardware is needed.",
        epilog=CAUTION)
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
    p.add_argument("-o", "--output", type=output, metavar="OUT.csv", help="output CSV (default capture-<time>.csv)")
    p.add_argument("--resume", action="store_true", help="continue the capture in -o OUT.csv")
    p.add_argument("--backend", type=text, default="@py", help="pyvisa backend (default @py, pure Python)")
    p.add_argument("--no-progress", action="store_true", help="no progress bar on stderr")
    sim = p.add_argument_group("simulation (no hardware)")
    sim.add_argument("--simulate", type=text, metavar="PLANT_FILE",
                     help="answer from a simulated instrument built from a sweep file or a model JSON")
    sim.add_argument("--noise", type=value(NUMBER, NON_NEGATIVE), default=1e-3, help="relative rms noise (default 1e-3)")
    sim.add_argument("--sim-point-time", type=value(TIME, Range(ge=0, le=MAX_SIM_POINT_S)), default=2e-4,
                     metavar="S",
                     help="simulated measurement time per point in s (default 2e-4; with --adaptive or "
                          "the bench-like options below, the fixed part of each reading)")
    sim.add_argument("--seed", type=SEED, default=0, help="noise seed (default 0)")
    sim.add_argument("--transport", choices=("auto", "sim", "tcp"), default="auto",
                     help="sim: pyvisa-sim backend; tcp: pyvisa-py over a 127.0.0.1 socket")
    sim.add_argument("--noise-density", type=value(NUMBER, NON_NEGATIVE), default=0.0, metavar="V/rtHz",
                     help="noise density of each analyzer channel, V/sqrt(Hz) (default 0)")
    sim.add_argument("--settle-cycles", type=value(NUMBER, NON_NEGATIVE), default=0.0, metavar="N",
                     help="stimulus cycles waited after each change of frequency, level or bandwidth")
    sim.add_argument("--saturation", type=value(VOLTAGE), metavar="V",
                     help="soft saturation of the simulated loop above this amplitude (default none)")
    ad = p.add_argument_group("adaptive capture (--adaptive)")
    ad.add_argument("--adaptive", action="store_true",
                    help="place points where the margins are decided and stop when they are known")
    ad.add_argument("--pm-sigma", type=value(ANGLE), default=0.5, metavar="DEG",
                    help="stop when the phase margin's sigma is this small (default 0.5 deg)")
    ad.add_argument("--gm-sigma", type=value(DECIBEL), default=0.5, metavar="DB",
                    help="... and the gain margin's (default 0.5 dB)")
    ad.add_argument("--max-points", type=count(5), default=400, metavar="N",
                    help="stop after this many points (default 400)")
    ad.add_argument("--max-time", type=value(TIME), default=float("inf"), metavar="S",
                    help="stop after this much instrument time (default none)")
    ad.add_argument("--min-bandwidth", type=value(FREQUENCY), default=1.0, metavar="HZ",
                    help="narrowest bandwidth; beyond it readings are averaged (default 1 Hz); "
                         "--bandwidth is the widest (default 1 kHz)")
    ad.add_argument("--no-linearity-check", action="store_true",
                    help="skip measuring at half and double the level around the crossover")
    ad.add_argument("--auto-level", action="store_true",
                    help="when the level changes the response, continue at a level that does not")
    add_json_flag(p)
    p.set_defaults(func=run)


def simulated_instrument(path: str, args: argparse.Namespace):
    """The simulated analyzer for --simulate, and the sweep it was built from (or, for a
    model file, the model)."""
    from benchfit.bench.benchlike import BenchAnalyzer
    from benchfit.bench.simulator import (
        SimulatedAnalyzer,
        analyzer_for_sweep,
        interpolated_response,
    )

    bench = bool(args.adaptive or args.noise_density or args.settle_cycles or args.saturation is not None)
    if bench:
        # the bench-like analyzer on simulated time (benchfit.bench.benchlike)
        opts = {"noise": args.noise, "seed": args.seed, "overhead_s": args.sim_point_time,
                "noise_density_v": args.noise_density, "settle_cycles": args.settle_cycles,
                "saturation_v": args.saturation,
                "injection": (args.quantity or ("loop" if args.adaptive else "unknown")) == "loop"}
    else:
        # the plain analyzer: relative noise, a fixed time per point that really passes
        opts = {"noise": args.noise, "seed": args.seed, "time_per_point_s": args.sim_point_time}
    if str(path).lower().endswith(".json"):
        from benchfit.fitting.model import PlantModel

        model = PlantModel.from_json(path)
        return (BenchAnalyzer if bench else SimulatedAnalyzer)(model.response, **opts), model
    try:
        from benchfit.data import read_sweep

        resp = read_sweep(path)
    except ImportError:  # the general reader is optional; canonical files always read
        from benchfit.data import read_canonical_sweep

        resp = read_canonical_sweep(path)
    if not bench:
        return analyzer_for_sweep(resp, **opts), resp
    return BenchAnalyzer(interpolated_response(resp), f_min_hz=resp.f_min_hz, f_max_hz=resp.f_max_hz,
                         **opts), resp


def _band(args: argparse.Namespace, sweep) -> tuple[float | None, float | None]:
    """The default band: a sweep file's own, or around a model's poles, zeros and crossover."""
    if sweep is None:
        return None, None
    if hasattr(sweep, "f_min_hz"):
        return sweep.f_min_hz, sweep.f_max_hz
    from benchfit.loop.densegrid import model_band

    return model_band(sweep, margin_decades=1.0)


def _settings(args: argparse.Namespace, sweep):
    from benchfit.bench.capture import CaptureSettings

    def freq(given, option, default):
        if given is not None:
            return given
        if default is None:
            raise InputError("required (or use --simulate with a sweep file)", source=option)
        return default

    lo, hi = _band(args, sweep)
    start = freq(args.start, "--start", lo)
    stop = freq(args.stop, "--stop", hi)
    if args.points is not None:
        points = args.points
    elif sweep is not None:
        points = min(len(sweep), 201) if hasattr(sweep, "f_min_hz") else 201
    else:
        points = None
    if points is None:
        raise InputError("required", source="--points")
    return CaptureSettings(
        start_hz=start, stop_hz=stop, points=points, spacing=args.spacing,
        level_v=args.level, bandwidth_hz=args.bandwidth,
        mode=args.mode, segment_points=args.segment_points,
        quantity=args.quantity or getattr(sweep, "quantity", "unknown"))


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
    out = args.output or f"capture-{_dt.datetime.now(_dt.UTC).strftime('%Y%m%d-%H%M%S')}.csv"
    if args.adaptive:
        return _run_adaptive(args, profile, inst, sweep, out)
    settings = _settings(args, sweep)
    settings.validate()
    clock = inst.clock if inst is not None else time.monotonic
    t0 = clock()
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
    d = {**result.to_dict(), "points": result.points_saved, "instrument_time_s": clock() - t0}
    emit(args, d, result.summary())
    if not result.complete:
        print(f"benchfit: {result.summary()}", file=sys.stderr)
        return 130
    return 0


def _run_adaptive(args: argparse.Namespace, profile, inst, sweep, out: str) -> int:
    """--adaptive: the sweep planner (benchfit.planner) on the session."""
    from benchfit.bench.sim_transport import bench_session
    from benchfit.planner.adaptive import INTERRUPTED, PRECISION, AdaptiveSettings, run_adaptive
    from benchfit.planner.probe import Probe

    if args.points is not None or args.mode != "sweep" or args.segment_points:
        bad = "--points" if args.points is not None else ("--mode" if args.mode != "sweep"
                                                          else "--segment-points")
        raise InputError("the adaptive capture places its own points one by one; leave it out",
                         source=bad)
    from benchfit.planner.settings import LOOP_QUANTITIES, NEEDS_LOOP_GAIN

    declared = getattr(sweep, "quantity", None)
    if args.quantity is None and declared is not None and declared not in LOOP_QUANTITIES:
        line = (getattr(sweep, "meta", None) or {}).get("declared_quantity", {}).get("line")
        said = f" (its header says {line!r})" if line else ""
        raise InputError(f"a sweep of {declared!r}{said}, not a loop gain; {NEEDS_LOOP_GAIN} "
                         "(or --quantity loop if it is one)", source=args.simulate)
    lo, hi = _band(args, sweep)
    for given, opt in ((args.start if args.start is not None else lo, "--start"),
                       (args.stop if args.stop is not None else hi, "--stop")):
        if given is None:
            raise InputError("required with --adaptive (or use --simulate with a sweep or model file)",
                             source=opt)
    settings = AdaptiveSettings(
        start_hz=args.start if args.start is not None else lo,
        stop_hz=args.stop if args.stop is not None else hi,
        level_v=args.level if args.level is not None else 0.01,
        bandwidth_hz=args.bandwidth if args.bandwidth is not None else 1000.0,
        min_bandwidth_hz=args.min_bandwidth, pm_sigma_deg=args.pm_sigma, gm_sigma_db=args.gm_sigma,
        max_points=args.max_points, max_time_s=args.max_time, linearity=not args.no_linearity_check,
        auto_level=args.auto_level, quantity=args.quantity or "loop")
    settings.validate()
    resource = f"simulated:{args.simulate}" if inst is not None else args.resource
    show = (not args.no_progress) and sys.stderr.isatty()

    def progress(n: int, why: str) -> None:
        if show:
            print(f"\r{n} points measured (last: {why})   ", end="", file=sys.stderr, flush=True)

    with bench_session(profile, resource=args.resource, instrument=inst, transport=args.transport,
                       backend=args.backend) as session:
        probe = Probe(session, clock=inst.clock if inst is not None else time.monotonic)
        result = run_adaptive(probe, settings, out, resume=args.resume, resource=resource,
                              seed=args.seed, progress=progress)
    if show:
        print(file=sys.stderr)
    for w in result.warnings:
        warn(w)
    emit(args, result.to_dict(), result.summary())
    if result.stopped_because == INTERRUPTED:
        print(f"benchfit: interrupted; {result.points_measured} points are saved in {out} and its "
              "log; run the same command with --resume to continue", file=sys.stderr)
        return 130
    if result.stopped_because != PRECISION:
        warn(f"stopped ({result.stopped_because}) before the margins reached the asked sigma")
    return 0
