"""``benchfit step TRACE``: measure and fit a scope step (or load step), estimate the margin."""

from __future__ import annotations

import argparse

from benchfit.cli.common import add_json_flag, emit, warn_read
from benchfit.cli.values import (
    CURRENT,
    PERCENT,
    POSITIVE,
    TIME,
    VOLTAGE,
    Range,
    argtype,
    output,
    parse_value,
    text,
    value,
)
from benchfit.errors import InputError


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "step", help="measure and fit a step or load-step trace; phase margin from the ringing",
        description="Measure a scope step (levels, overshoot, rise, settling, ringing), fit a step model "
                    "with standard errors, estimate the phase margin from the damping, and compare with "
                    "a loop prediction. With --load-step, measure deviation and recovery instead.")
    p.add_argument("trace", help="scope export (CSV/TSV, any dialect) or canonical trace CSV")
    p.add_argument("--channel", type=text, help="channel name or 0-based index (default: the first)")
    p.add_argument("--model", type=text, default="second-order", metavar="MODEL",
                   help="second-order (default), third-order, or loop:DESIGN.json (fit the loop's gain "
                        "and dominant pole pair to the trace)")
    p.add_argument("--band", type=argtype(parse_band, "band"), default="2%", help="settling / recovery band: a percentage of the step "
                                                "(2%%) or volts (5mV); default 2%%")
    p.add_argument("--step-time", type=value(TIME, Range()), help="step instant in s when known (default: found from the trace)")
    p.add_argument("--loop", type=text, metavar="JSON", help="design or loop-gain JSON to compare the step with "
                                                  "(implied by --model loop:...)")
    p.add_argument("--no-fit", action="store_true", help="measurements only")
    g = p.add_argument_group("load step")
    g.add_argument("--load-step", action="store_true", help="the trace is the output after a load step")
    g.add_argument("--current-step", type=value(CURRENT, POSITIVE), metavar="AMPS", help="load current step, e.g. 2 or 500m (A)")
    g.add_argument("--current-channel", type=text, metavar="NAME",
                   help="channel of the same trace holding the load current (its step gives the size)")
    g.add_argument("--zout", type=text, metavar="FILE", help="closed-loop output impedance to compare with: a sweep "
                                                  "file or JSON (frequency response or model)")
    r = p.add_argument_group("reading the trace (detected; these override)")
    r.add_argument("--columns", type=text, metavar="LIST", help="column names in order, e.g. time,CH1,CH2 "
                                                     "(for a file with no header)")
    r.add_argument("--time-unit", type=text, metavar="UNIT", help="time column unit: s, ms, us or ns")
    r.add_argument("--sample-interval", type=value(TIME, POSITIVE), metavar="DT", help="sample interval when the file has no time "
                                                           "column (e.g. 1u, 2e-7)")
    r.add_argument("--skip-bad-rows", action="store_true", default=None,
                   help="leave out rows that cannot be read instead of refusing the file; they are "
                        "listed as skipped")
    p.add_argument("-o", "--output", type=output, metavar="JSON", help="write the full result (with curves) here")
    add_json_flag(p)
    p.set_defaults(func=run)


def parse_band(text: str) -> tuple[float, float | None]:
    """'2%' -> (0.02, None); '5mV' / '0.005' V -> (0.02, 0.005)."""
    t = text.strip()
    if t.endswith("%"):
        return parse_value(t, "--band", PERCENT, Range(gt=0, lt=100)) / 100.0, None
    return 0.02, parse_value(t, "--band", VOLTAGE, POSITIVE)


def _read_zout(path: str):
    from benchfit.data import FrequencyResponse, read_sweep
    from benchfit.fileio import read_json
    from benchfit.fitting.model import PlantModel

    if path.lower().endswith(".json"):
        d = read_json(path)
        try:
            if "freq_hz" in d:
                return FrequencyResponse.from_dict(d)
            return PlantModel.from_dict(d)
        except InputError as e:
            raise InputError(e.message, source=path) from None
    return read_sweep(path)


def run(args: argparse.Namespace) -> int:
    from benchfit.data import read_trace
    from benchfit.steps.analyse import analyse_load_step, analyse_step
    from benchfit.steps.compare import read_loop_gain

    band, band_v = args.band
    step_time = args.step_time
    model = args.model
    loop_path = args.loop
    if model.startswith("loop:"):
        loop_path = model[5:]
        model = "loop"
        if not loop_path:
            raise InputError("expected loop:DESIGN.json", source="--model")
    elif model not in ("second-order", "third-order"):
        raise InputError(f"{model!r} unknown; expected second-order, third-order or loop:DESIGN.json",
                         source="--model")
    channel = args.channel
    overrides = {"columns": args.columns, "time_unit": args.time_unit,
                 "sample_interval_s": args.sample_interval, "skip_bad_rows": args.skip_bad_rows}
    trace = warn_read(read_trace(args.trace, **{k: v for k, v in overrides.items() if v is not None}),
                      args.trace)
    if args.load_step:
        if args.model != "second-order" or loop_path:
            raise InputError("--model and --loop apply to reference steps, not --load-step",
                             source="--load-step")
        current = args.current_step
        zout = _read_zout(args.zout) if args.zout else None
        result = analyse_load_step(trace, channel=channel, band=band, band_v=band_v, step_time_s=step_time,
                                   current_step_a=current, current_channel=args.current_channel, zout=zout,
                                   zout_label=f"output impedance {args.zout}" if args.zout else "",
                                   fit=not args.no_fit)
    else:
        if args.current_step is not None or args.zout or args.current_channel:
            raise InputError("--current-step, --current-channel and --zout need --load-step",
                             source="--zout")
        loop = predicted = None
        label = "loop gain"
        if loop_path:
            loop, predicted, label = read_loop_gain(loop_path)
            label = f"{label} from {loop_path}"
        if args.no_fit and model != "second-order":
            raise InputError("--no-fit cannot be combined with a --model", source="--no-fit")
        result = analyse_step(trace, channel=channel, model=model, loop=loop, loop_label=label,
                              predicted_margins=predicted, band=band, band_v=band_v,
                              step_time_s=step_time, fit=not args.no_fit)
    if args.output:
        result.to_json(args.output)
    emit(args, result.to_dict(include_curves=False), result.report())
    return 0
