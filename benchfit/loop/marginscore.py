"""Analysis of one evaluated loop curve: crossings, main crossover, Nyquist verdict, warnings.

:func:`analyse` is the common core of :func:`benchfit.loop.margins.margins_from_data`
(a sampled sweep: crossings interpolated in log f) and
:func:`~benchfit.loop.margins.margins_from_model` (a dense model grid: crossings
polished with Brent's method on the exact function).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy import optimize

from benchfit.errors import InputError
from benchfit.loop.asymptote import fit_asymptote, low_end_gain_db
from benchfit.loop.crossings import main_score, to_db, wrap180
from benchfit.loop.densegrid import LIVE_DB, LoopFn
from benchfit.loop.marginsresult import Margins
from benchfit.loop.sweeprules import (
    dc_phase_crossing,
    given_count_conflict,
    modulus_gaps,
    phase_gaps,
)
from benchfit.loop.verdict import STABLE, UNDECIDED, UNSTABLE, nyquist_verdict
from benchfit.provenance import Provenance

# data: a crossing whose neighbouring points differ more than this is "coarse"
_COARSE_PHASE_DEG = 15.0
_COARSE_DB = 6.0
_JUMP_PHASE_DEG = 45.0           # anywhere in the band: possible under-sampled resonance


@dataclass
class Curve:
    f: np.ndarray          # Hz, increasing
    T: np.ndarray          # complex
    phase: np.ndarray      # unwrapped degrees
    exact: LoopFn | None   # the model (None for data)


def unwrapped_phase(T: np.ndarray) -> np.ndarray:
    steps = np.angle(T[1:] / T[:-1])
    return np.degrees(np.concatenate([[np.angle(T[0])], np.angle(T[0]) + np.cumsum(steps)]))


def _gain_crossing(c: Curve, i: int) -> tuple[float, float]:
    """(freq_hz, phase_deg) of the |T|=1 crossing inside interval i."""
    x0, x1 = math.log10(c.f[i]), math.log10(c.f[i + 1])
    g0, g1 = to_db(c.T[i]), to_db(c.T[i + 1])
    if c.exact is None or g0 == 0.0 or g1 == 0.0:
        t = g0 / (g0 - g1) if g0 != g1 else 0.0
        return 10 ** (x0 + t * (x1 - x0)), float(c.phase[i] + t * (c.phase[i + 1] - c.phase[i]))
    fn, Ti, pi = c.exact, c.T[i], c.phase[i]
    try:
        with np.errstate(all="ignore"):    # a probe may land on an undamped pole
            x = optimize.brentq(lambda xx: float(to_db(fn(np.array([10 ** xx]))[0])), x0, x1,
                                xtol=1e-13)
    except ValueError:      # grid too coarse for the exact function (capped refinement)
        return _gain_crossing(Curve(c.f, c.T, c.phase, None), i)
    Tx = fn(np.array([10 ** x]))[0]
    return 10 ** x, float(pi + np.degrees(np.angle(Tx / Ti)))


def _phase_crossing(c: Curve, i: int, target: float) -> tuple[float, float]:
    """(freq_hz, |T| in dB) where the unwrapped phase equals ``target`` in interval i."""
    x0, x1 = math.log10(c.f[i]), math.log10(c.f[i + 1])
    p0, p1 = c.phase[i], c.phase[i + 1]
    if c.exact is None or p0 == target or p1 == target:
        t = (target - p0) / (p1 - p0) if p1 != p0 else 0.0
        g0, g1 = to_db(c.T[i]), to_db(c.T[i + 1])
        return 10 ** (x0 + t * (x1 - x0)), float(g0 + t * (g1 - g0))
    fn, Ti = c.exact, c.T[i]

    def h(xx):
        return p0 + np.degrees(np.angle(fn(np.array([10 ** xx]))[0] / Ti)) - target

    try:
        with np.errstate(all="ignore"):
            x = optimize.brentq(h, x0, x1, xtol=1e-13)
    except ValueError:      # grid too coarse for the exact function (capped refinement)
        return _phase_crossing(Curve(c.f, c.T, c.phase, None), i, target)
    return 10 ** x, float(to_db(fn(np.array([10 ** x]))[0]))



def _main_crossing(x: np.ndarray, downs: list[int], ups: list[int],
                   xc: dict[int, float]) -> int | None:
    """Index (interval) of the main crossover (see the module notes)."""
    best, best_score = None, -np.inf
    for j in downs:
        starts = [xc[i] for i in ups if i < j]
        length = xc[j] - (starts[-1] if starts else x[0])
        score = float(main_score(np.array(length), np.array(not starts), np.array(j)))
        if score >= best_score:          # ties -> higher frequency
            best, best_score = j, score
    return best


def analyse(c: Curve, *, unstable: int, integrators: int | None, data: bool,
             extra_warnings: Sequence[str], provenance: Provenance) -> Margins:
    f, T, ph = c.f, c.T, c.phase
    x = np.log10(f)
    db = to_db(T)
    warnings: list[str] = list(extra_warnings)
    if not np.all(np.isfinite(db)):
        raise InputError("the loop gain is zero or infinite at some frequency in the band")
    pstep = np.abs(np.diff(ph))
    dstep = np.abs(np.diff(db))

    # --- gain crossings
    above = db > 0.0
    idx = np.flatnonzero(above[:-1] != above[1:])
    gain: list[dict[str, Any]] = []
    xc: dict[int, float] = {}
    downs, ups = [], []
    for i in idx:
        fc, phc = _gain_crossing(c, int(i))
        pm = float(wrap180(180.0 + phc))
        direction = "down" if above[i] else "up"
        (downs if direction == "down" else ups).append(int(i))
        xc[int(i)] = math.log10(fc)
        gain.append({"kind": "gain", "freq_hz": fc, "value": pm, "direction": direction,
                     "main": False, "_i": int(i)})
        if data:
            lo, hi = max(i - 1, 0), min(i + 2, len(pstep))
            worst = float(np.max(pstep[lo:hi]))
            if worst > _COARSE_PHASE_DEG:
                warnings.append(
                    f"gain crossing at {fc:.4g} Hz: the sweep is coarse there (phase changes "
                    f"{worst:.0f} deg between neighbouring points); its phase margin "
                    f"({pm:.1f} deg) may be off by tens of degrees; measure more points around it")

    # --- phase crossings (∠T = -180° + 360°·m)
    k = np.floor((ph + 180.0) / 360.0)
    phase_x: list[dict[str, Any]] = []
    coarse_x: list[tuple[float, float]] = []   # (f, GM dB) of phase crossings on a coarse sweep
    for i in np.flatnonzero(k[:-1] != k[1:]):
        if c.exact is not None and max(db[i], db[i + 1]) < LIVE_DB:
            continue            # the dense grid does not resolve the phase down there
        lo_k, hi_k = sorted((k[i], k[i + 1]))
        targets = [-180.0 + 360.0 * m for m in np.arange(lo_k + 1, hi_k + 1)]
        if ph[i + 1] < ph[i]:
            targets = targets[::-1]
        for tgt in targets:
            fp, gdb = _phase_crossing(c, int(i), tgt)
            direction = "down" if ph[i + 1] < ph[i] else "up"
            phase_x.append({"kind": "phase", "freq_hz": fp, "value": -gdb, "direction": direction})
            if data and (dstep[max(i - 1, 0):i + 2].max() > _COARSE_DB
                         or pstep[max(i - 1, 0):i + 2].max() > 3 * _COARSE_PHASE_DEG):
                coarse_x.append((fp, -gdb))
    if coarse_x:
        # one line however many (a long delay gives a phase crossing every 1/τ Hz)
        fp, gm = min(coarse_x, key=lambda x: abs(x[1]))
        more = (f"; {len(coarse_x) - 1} more phase crossing(s) up to {coarse_x[-1][0]:.4g} Hz "
                "where the sweep is as coarse") if len(coarse_x) > 1 else ""
        warnings.append(f"phase crossing at {fp:.4g} Hz: the sweep is coarse there; its gain "
                        f"margin ({gm:.1f} dB) is uncertain{more}")

    # --- resolution of the whole sweep (data): under-sampled resonances
    gap_hz: tuple[tuple[float, float], ...] = ()   # where a phase crossing may hide unseen
    hidden = np.zeros(0, dtype=int)
    if data:
        live = np.maximum(db[:-1], db[1:]) > -20.0
        jumps = np.flatnonzero(live & (pstep > _JUMP_PHASE_DEG))
        if jumps.size:
            j = int(jumps[np.argmax(pstep[jumps])])
            warnings.append(
                f"the phase jumps {pstep[j]:.0f} deg between {f[j]:.4g} and {f[j + 1]:.4g} Hz "
                f"({jumps.size} such gap(s)): a resonance (or a delay's phase) is under-sampled; crossings and margins "
                "near there cannot be trusted; sweep with more points per decade")
        hidden = phase_gaps(db, pstep)
        gap_hz = tuple((float(f[g]), float(f[g + 1])) for g in hidden)
        gaps = [g for g in hidden if g not in set(jumps.tolist())]
        if gaps:
            g = int(gaps[np.argmax(pstep[gaps])])
            warnings.append(
                f"the phase changes {pstep[g]:.0f} deg between {f[g]:.4g} and {f[g + 1]:.4g} Hz "
                f"(|T| {db[g]:.0f} to {db[g + 1]:.0f} dB; {len(gaps)} such gap(s)): a phase "
                "crossing, and with it the gain margin, may lie in the gap; sweep there with "
                "more points")
        peaks = np.flatnonzero((db[1:-1] > db[:-2] + 3.0) & (db[1:-1] > db[2:] + 3.0))
        for p in peaks[:3]:
            warnings.append(f"sharp peak at {f[p + 1]:.4g} Hz is defined by one point; "
                            "its height and any crossing near it are uncertain")

    if data and len(gain) > 6:
        fs = [g["freq_hz"] for g in gain]
        warnings.append(f"{len(gain)} gain crossings between {min(fs):.4g} and {max(fs):.4g} Hz: the "
                        "magnitude hovers around 0 dB there and noise makes crossings; is this a "
                        "loop-gain measurement (not a closed-loop or plant response)?")

    # --- main crossover
    main_i = _main_crossing(x, downs, ups, xc)
    for g in gain:
        g["main"] = g["_i"] == main_i
    if main_i is not None:
        m = next(g for g in gain if g["main"])
        pm_main, fc_main = m["value"], m["freq_hz"]
    elif db[-1] > 0:
        pm_main, fc_main = math.nan, math.nan
    else:
        pm_main, fc_main = math.inf, math.nan
    if db[-1] > 0:
        warnings.append(
            f"the loop gain is still {db[-1]:+.1f} dB at the top of the band ({f[-1]:.4g} Hz): "
            "the crossover lies above it; extend the sweep")
    for g in gain:
        if not g["main"] and main_i is not None and abs(g["value"]) < abs(pm_main):
            warnings.append(f"gain crossing at {g['freq_hz']:.4g} Hz has a phase margin of "
                            f"{g['value']:.1f} deg, closer to -1 than the main crossover's "
                            f"{pm_main:.1f} deg")

    # --- closed-loop stability (Nyquist)
    v = nyquist_verdict(f, T, unstable, integrators, carry_low_end=data or integrators is None,
                        sweep=data)
    n_int, N, Z = int(v.integrators[0]), int(v.encirclements[0]), int(v.rhp[0])
    verdict = str(v.verdict[0])
    dev0, devinf = v.low_deviation, v.high_deviation
    asym = v.asymptotes.row(0) if v.asymptotes is not None else None
    # a sweep's low end is always fitted: it is the evidence a given count is checked against
    low_end = (asym if asym is not None else fit_asymptote(f, T)[0]) if data else None
    evidence = asym.describe() if asym is not None else f"{n_int} integrator(s), {'given' if data else 'of the model'}"
    stable = Z == 0          # with the chosen count: which margins apply
    if asym is not None and db[0] < 0 and asym.slope_n - 3 * asym.slope_sigma > 0.1:
        warnings.append(f"the loop gain is below 0 dB at the bottom of the band ({f[0]:.4g} Hz) "
                        "and rising towards lower frequencies: a crossing may lie below the band")
    if v.inconsistent is not None and bool(v.inconsistent[0]):
        warnings.append(f"closed-loop stability is UNDECIDED: the encirclement count gives a "
                        f"negative number of closed-loop right-half-plane poles ({Z} with P = "
                        f"{unstable}, N = {N}, {n_int} integrator(s)), which no loop has: the data "
                        "are inconsistent (noise where |T| is large, a wrong integrator count, or "
                        "open-loop right-half-plane poles not declared with --unstable-poles)")
    elif verdict == UNDECIDED and data and db[-1] >= 0:
        warnings.append(f"closed-loop stability is UNDECIDED: the sweep ends at {f[-1]:.4g} Hz "
                        f"with |T| {db[-1]:+.1f} dB, so the crossings that decide the "
                        "encirclement count lie above it; extend the sweep")
    elif verdict == UNDECIDED:
        warnings.append(f"closed-loop stability is UNDECIDED: {evidence}, and these counts give "
                        "different encirclement verdicts; extend the sweep downwards or state "
                        "the integrator count")
    conflict = data and integrators is not None and given_count_conflict(low_end, n_int)
    if conflict:
        warnings.append(f"{n_int} integrator(s) were given, but the sweep's low-frequency "
                        f"asymptote does not allow that count: {low_end.describe()}; the "
                        "verdict uses the given count; check --integrators")
    elif float(dev0[0]) > 60.0:
        warnings.append(f"at the bottom of the band ({f[0]:.4g} Hz) the loop phase is still "
                        f"{float(dev0[0]):.0f} deg from its low-frequency asymptote: the stability "
                        "verdict assumes nothing happens below the band; extend it downwards")
    if db[-1] > 0 or float(devinf[0]) > 60.0:
        warnings.append("the stability verdict assumes |T| stays below 1 above the band")
    if data and np.any(np.abs(np.diff(np.degrees(np.unwrap(np.angle(1 + T))))) > 90.0):
        warnings.append("1+T turns more than 90 deg between neighbouring points: the sweep is too "
                        "coarse near -1 for a sure encirclement count")
    if verdict == UNSTABLE:
        warnings.append(f"the closed loop is UNSTABLE: {Z} closed-loop pole(s) in the right "
                        f"half-plane (Nyquist: P = {unstable}, N = {N})")
    if unstable:
        warnings.append(
            f"the open loop has {unstable} right-half-plane pole(s): closed-loop stability is decided "
            f"by the Nyquist encirclement count ({N} counter-clockwise encirclement(s) of -1), "
            "not by the sign of the gain margin")

    # --- gain margins
    gms = np.array([p["value"] for p in phase_x])
    fps = np.array([p["freq_hz"] for p in phase_x])
    gm_up, f_up = math.inf, math.nan
    gm_down = -math.inf
    if gms.size:
        pos = gms > 0
        if pos.any():
            j = int(np.argmin(np.where(pos, gms, np.inf)))
            gm_up, f_up = float(gms[j]), float(fps[j])
        if (~pos).any():
            gm_down = float(np.max(gms[~pos]))
    # a real negative T at DC is a phase crossing at f = 0 (open-loop-unstable plants)
    if dc_phase_crossing(n_int, float(ph[0]), float(dev0[0]), low_end):
        g0 = -float(db[0]) if low_end is None else -low_end_gain_db(f, T)
        if c.exact is not None:        # a model can be evaluated at DC itself
            with np.errstate(all="ignore"):
                t0 = np.asarray(c.exact(np.array([0.0])), dtype=complex).reshape(-1)[0]
            if np.isfinite(t0) and t0 != 0:
                g0 = -float(to_db(t0))
        phase_x.insert(0, {"kind": "phase", "freq_hz": 0.0, "value": g0, "direction": "dc"})
        if g0 > 0 and g0 < gm_up:
            gm_up, f_up = g0, 0.0
        elif g0 <= 0:
            gm_down = max(gm_down, g0)
    if stable:
        gm, f_gm = gm_up, f_up
        if gap_hz and math.isinf(gm):
            gm = math.nan       # none found, but one may hide in a gap: not "unbounded"
        if math.isfinite(gm_down) and not unstable:
            warnings.append(f"conditionally stable: lowering the loop gain by {-gm_down:.1f} dB "
                            "makes the loop unstable")
        elif math.isfinite(gm_down):
            warnings.append(f"the loop needs its gain: lowering it by {-gm_down:.1f} dB makes it unstable")
    else:
        if gms.size:
            j = int(np.argmin(np.abs(gms)))
            gm, f_gm = float(gms[j]), float(fps[j])
        else:
            gm, f_gm = math.nan, math.nan

    # --- delay margin
    if data and db[-1] >= 0 and not gain:
        dm = math.nan           # the crossover lies above the sweep: no delay margin known
    elif not stable:
        dm = 0.0
    elif gain:
        taus = [(np.mod(g["value"], 360.0) or 360.0) * math.pi / 180.0 / (2 * math.pi * g["freq_hz"])
                for g in gain]
        dm = float(min(taus))
    else:
        dm = math.inf

    # --- modulus margin
    r = np.abs(1.0 + T)
    j = int(np.argmin(r))
    mm, fmm = float(r[j]), float(f[j])
    if c.exact is not None and 0 < j < len(f) - 1:
        fn = c.exact
        res = optimize.minimize_scalar(lambda xx: float(np.abs(1 + fn(np.array([10 ** xx]))[0])),
                                       bounds=(x[j - 1], x[j + 1]), method="bounded",
                                       options={"xatol": 1e-10})
        if res.fun < mm:
            mm, fmm = float(res.fun), float(10 ** res.x)
    if j == len(f) - 1 and len(f) > 1 and r[-1] < r[-2]:
        warnings.append(f"|1+T| is still falling at the top of the band ({f[-1]:.4g} Hz): the "
                        "modulus margin there is an upper bound")
    if j == 0 and len(f) > 1 and r[0] < r[1]:
        warnings.append(f"|1+T| is smallest at the bottom of the band ({f[0]:.4g} Hz); "
                        "the modulus margin there is an upper bound")
    mod_gap_hz: tuple[tuple[float, float], ...] = ()
    if data:
        mod_gap_hz = tuple((float(f[g]), float(f[g + 1])) for g in modulus_gaps(x, j, hidden, db, mm))
        if mod_gap_hz:
            lo, hi = mod_gap_hz[0]
            warnings.append(f"|1+T| may dip below its smallest sampled value ({mm:.3g} at "
                            f"{fmm:.4g} Hz) between {lo:.4g} and {hi:.4g} Hz ({len(mod_gap_hz)} "
                            "such gap(s)): the modulus margin is an upper bound (Ms a lower "
                            "bound); sweep there with more points")

    worst = min(gain, key=lambda g: abs(g["value"]), default=None)
    crossings = sorted(
        [{k2: v for k2, v in g.items() if k2 != "_i"} for g in gain] + phase_x,
        key=lambda d: (d["freq_hz"], d["kind"]))
    return Margins(
        phase_margin_deg=float(pm_main), crossover_hz=float(fc_main),
        gain_margin_db=float(gm), phase_crossover_hz=float(f_gm),
        delay_margin_s=dm, modulus_margin=mm, modulus_freq_hz=fmm,
        peak_sensitivity=(1.0 / mm if mm > 0 else math.inf),
        crossings=tuple(crossings), gain_reduction_margin_db=float(gm_down),
        min_phase_margin_deg=worst["value"] if worst else math.inf,
        min_phase_margin_hz=worst["freq_hz"] if worst else math.nan,
        open_loop_unstable_poles=int(unstable), closed_loop_stable=verdict == STABLE,
        verdict=verdict, integrators_evidence=evidence,
        encirclements=N, integrators=n_int, f_min_hz=float(f[0]), f_max_hz=float(f[-1]),
        gain_margin_gaps_hz=gap_hz, modulus_margin_gaps_hz=mod_gap_hz,
        warnings=tuple(dict.fromkeys(warnings)), provenance=provenance,
    )
