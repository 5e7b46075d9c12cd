"""`benchfit loopgain`: the loop gain T of a loop that cannot be opened, from a measurement pair."""

from __future__ import annotations

import argparse

from benchfit.cli.common import add_json_flag, emit, warn, warn_read
from benchfit.cli.values import NUMBER, Range, text, value
from benchfit.errors import InputError


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "loopgain", help="recover the loop gain T from closed-loop measurements (no loop opening)",
        description="Recover the loop gain T (return ratio) from one measurement pair and write it "
                    "as a loop sweep that 'margins' and 'fit' read: a closed-loop response with the "
                    "known feedback factor (T = G·β/(1 − G·β), non-inverting stage) or ideal gain; "
                    "voltage- and current-injection ratios at one point (T = (Tv·Ti − 1)/(Tv + Ti + 2)); "
                    "or the open- and closed-loop output impedance (T = Zol/Zcl − 1).")
    p.add_argument("--closed", type=text, metavar="SWEEP", help="measured closed-loop gain G = Vout/Vin")
    p.add_argument("--beta", type=text, metavar="B|SWEEP",
                   help="with --closed: feedback factor β = V-/Vout, a number (e.g. 0.4) or a sweep")
    p.add_argument("--ideal-gain", type=value(NUMBER, Range(nonzero=True)), metavar="G0",
                   help="with --closed, instead of --beta: the ideal closed-loop gain (e.g. -2.5 for an "
                        "inverting stage with Rf/Rg = 2.5)")
    p.add_argument("--tv", type=text, metavar="SWEEP", help="voltage-injection ratio Tv = -v_return/v_forward")
    p.add_argument("--ti", type=text, metavar="SWEEP", help="current-injection ratio Ti = -i_return/i_forward")
    p.add_argument("--z-open", type=text, metavar="SWEEP", help="open-loop output impedance (ohm)")
    p.add_argument("--z-closed", type=text, metavar="SWEEP", help="closed-loop output impedance (ohm)")
    p.add_argument("-o", "--output", type=text, required=True, metavar="CSV",
                   help="loop sweep to write (benchfit's canonical sweep CSV)")
    add_json_flag(p)
    p.set_defaults(func=run)


def _number_or_sweep(textv: str, option: str):
    from pathlib import Path

    from benchfit.cli.values import parse_value
    from benchfit.data import read_sweep

    if Path(textv).exists():
        return warn_read(read_sweep(textv), textv)
    try:
        return parse_value(textv, option, NUMBER)
    except InputError:
        raise InputError(f"{textv!r} is neither a number nor a sweep file", source=option) from None


def run(args: argparse.Namespace) -> int:
    from benchfit.data import read_sweep
    from benchfit.data.canonical import write_sweep_csv
    from benchfit.loop import loop_recovery as lr
    from benchfit.loop.loopfile import margins_of_loop

    pairs = {"closed": args.closed is not None, "injection": args.tv is not None or args.ti is not None,
             "impedance": args.z_open is not None or args.z_closed is not None}
    if sum(pairs.values()) != 1:
        raise InputError("give one measurement pair: --closed with --beta (or --ideal-gain), "
                         "--tv with --ti, or --z-open with --z-closed", source="loopgain")
    if pairs["closed"]:
        g = warn_read(read_sweep(args.closed), args.closed)
        if (args.beta is None) == (args.ideal_gain is None):
            raise InputError("--closed needs --beta or --ideal-gain (one of them)", source="--beta")
        t = lr.loop_from_closed_loop(g, _number_or_sweep(args.beta, "--beta")
                                     if args.beta is not None else None, ideal_gain=args.ideal_gain)
        how = "closed loop and feedback"
    elif pairs["injection"]:
        if args.tv is None or args.ti is None:
            raise InputError("injection needs both --tv and --ti", source="--tv" if args.tv is None else "--ti")
        t = lr.loop_from_injection(warn_read(read_sweep(args.tv), args.tv), warn_read(read_sweep(args.ti), args.ti))
        how = "voltage and current injection"
    else:
        if args.z_open is None or args.z_closed is None:
            raise InputError("output impedance needs both --z-open and --z-closed",
                             source="--z-open" if args.z_open is None else "--z-closed")
        t = lr.loop_from_output_impedance(warn_read(read_sweep(args.z_open), args.z_open), warn_read(read_sweep(args.z_closed), args.z_closed))
        how = "open- and closed-loop output impedance"
    path = write_sweep_csv(t, args.output)
    m = margins_of_loop(t)
    extra = [w for w in (lr.noise_drop_warning(t),
                         lr.amplification_warning(t, "injection" if pairs["injection"] else "ratio"))
             if w]
    if not args.json:
        for w in tuple(extra) + m.warnings:
            warn(w)
    data = {"output": str(path), "method": how, "points": len(t), "f_min_hz": t.f_min_hz,
            "f_max_hz": t.f_max_hz, "margins": m.to_dict(), "warnings": extra}
    emit(args, data, f"loop gain from {how}: {len(t)} points, {t.f_min_hz:.4g}..{t.f_max_hz:.4g} Hz\n"
                     f"PM {m.phase_margin_deg:.1f}° at {m.crossover_hz:.4g} Hz, GM {m.gain_margin_db:.1f} dB"
                     f"{'' if m.closed_loop_stable else '  ' + (m.verdict or 'unstable').upper()}\nwrote {path}")
    return 0
