"""``benchfit margins LOOP``: phase, gain, delay and modulus margins, every crossing."""

from __future__ import annotations

import argparse

from benchfit.cli.cmd_inspect import add_reader_flags, reader_options
from benchfit.cli.common import add_json_flag, emit, warn, warn_read
from benchfit.cli.values import NON_NEGATIVE, TIME, band, count, value
from benchfit.errors import InputError

#: Most turns of phase an added --delay may make at the top of the band a model's margins are
#: sought in (common practice, no source): past it the evaluation grid grows without bound
#: (--delay 20000 ran 44 s) while the encirclement count stops meaning anything.
MAX_DELAY_TURNS = 1e5
#: Largest phase step (turns) an added delay may make between neighbouring points of a sweep
#: where |T| >= 0.5: a quarter turn, so crossings and the count of encirclements of -1 cannot
#: alias (common practice, no source).  Where both neighbours have |T| < 0.5 the curve stays
#: inside that circle and cannot wind around -1 whatever the delay does to its phase.
MAX_STEP_TURNS = 0.25


def check_added_delay(loop, delay_s: float, band) -> None:
    """Refuse an added delay that the loop's frequencies cannot follow.

    The evidence: for a sweep, how far ``exp(-j 2 pi f delay)`` turns between neighbouring
    points that are near or above 0 dB (at most :data:`MAX_STEP_TURNS`); for a model, how many
    turns it makes at the top of the band its margins are evaluated in, with the delay (at most
    :data:`MAX_DELAY_TURNS`).  ``--delay 20k`` read as 20 000 s ran 44 s and reported a
    negative count of closed-loop poles.

    Raises
    ------
    InputError
        Naming ``--delay`` and the largest delay this loop can carry.
    """
    import numpy as np

    from benchfit.data import FrequencyResponse
    from benchfit.fitting.model import PlantModel
    from benchfit.loop.densegrid import model_band

    if not delay_s:
        return
    lo, hi = band if band is not None else (None, None)
    if isinstance(loop, FrequencyResponse):
        keep = (loop.freq_hz >= (lo or 0)) & (loop.freq_hz <= (hi or np.inf))
        f, big = loop.freq_hz[keep], np.abs(loop.response[keep]) >= 0.5
        near = big[:-1] | big[1:]
        if not np.any(near):
            return  # never near 0 dB: the delay cannot change what the margins code finds
        limit = MAX_STEP_TURNS / float(np.max(np.diff(f)[near]))
        what = (f"between neighbouring points of the sweep near 0 dB (at most {MAX_STEP_TURNS:g} "
                "turn)")
    else:
        delayed = PlantModel(loop.zeros, loop.poles, loop.k, delay_s=loop.delay_s + delay_s)
        top = hi if hi is not None else model_band(delayed)[1]
        limit = MAX_DELAY_TURNS / float(top)
        what = f"at {top:.3g} Hz, the top of the band (at most {MAX_DELAY_TURNS:g} turns)"
    if delay_s > limit:
        raise InputError(f"{delay_s:g} s turns the phase too far {what}; the largest delay this "
                         f"loop can carry is {limit:.3g} s", source="--delay")


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "margins", help="stability margins of a loop gain (sweep, model, fit result or design)",
        description="Phase margin, gain margin, delay margin, modulus margin and every gain and "
                    "phase crossing of a loop gain T (the return ratio). LOOP is a measured "
                    "loop-gain sweep, a model or fit-result JSON, or a design JSON (its snapped "
                    "loop). Closed-loop stability is decided by the Nyquist encirclement count.")
    p.add_argument("loop", metavar="LOOP", help="sweep file or JSON (model, fit result, design)")
    p.add_argument("--unstable-poles", type=count(0), metavar="N",
                   help="open-loop right-half-plane poles (default: counted from a model, 0 for a sweep)")
    p.add_argument("--band", type=band, metavar="FMIN:FMAX", help="restrict to this band in Hz (k/M allowed)")
    p.add_argument("--delay", type=value(TIME, NON_NEGATIVE), default=0.0, metavar="S", help="add a pure delay to the loop, e.g. 2u")
    # 0..4: the counts the low-end fit weighs (benchfit.loop.asymptote.MAX_INTEGRATORS)
    p.add_argument("--integrators", type=count(0, 4), metavar="N",
                   help="open-loop poles at s = 0 of a sweep, 0 to 4 (default: from the fit of "
                        "its low-frequency asymptote; a model counts its own)")
    p.add_argument("--ideal", action="store_true", help="for a design: use the ideal parts, not snapped")
    add_reader_flags(p)
    add_json_flag(p)
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    from benchfit.loop.loopfile import margins_of_loop, read_loop

    opts = {k: v for k, v in reader_options(args).items()
            if k not in ("channel", "time_unit", "sample_interval_s")}
    loop = warn_read(read_loop(args.loop, which="ideal" if args.ideal else "snapped", **opts), args.loop)
    check_added_delay(loop, args.delay, args.band)
    m = margins_of_loop(loop, unstable_open_loop_poles=args.unstable_poles, band=args.band,
                        extra_delay_s=args.delay, integrators=args.integrators)
    data = m.to_dict()
    data["source"] = str(args.loop)
    if not args.json:
        for w in m.warnings:
            warn(w)
    emit(args, data, m.report().split("\nwarning: ")[0])
    return 0
