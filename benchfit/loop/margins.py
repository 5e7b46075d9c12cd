"""Stability margins of a loop gain T(jω), from a model or from measured data.

Conventions
-----------
* T is the return ratio: the closed loop is stable when 1 + T has no zeros in
  the right half-plane.  Phase margin at a gain crossing (|T| = 1) is
  ``PM = 180° + ∠T`` wrapped to (-180°, 180°]; gain margin at a phase crossing
  (∠T = -180° mod 360°) is ``GM = -20·log10|T|``.
* **Every** crossing found in the band is reported in ``crossings``.  The
  *main* crossover is the highest-frequency falling gain crossing that ends a
  *broad* stretch of |T| > 1: one that starts at the bottom of the band or
  spans at least half a decade (our own threshold: a resonance that pokes
  above 0 dB is narrower than that unless it rises tens of dB).  If no stretch
  is broad, the longest one wins.  For an ordinary loop this is the loop
  bandwidth; a resonance above it does not take its place (its crossings are
  still listed, and a warning names any crossing closer to -1), and a dip
  below 0 dB in mid-band (conditionally stable designs) does not pull the
  crossover down to the dip.  ``phase_margin_deg`` is the phase margin *at the
  main crossover*.
* ``gain_margin_db`` is the smallest positive gain margin: how much the gain
  may rise before the loop goes unstable.  A phase crossing where |T| > 1
  gives a negative value, the gain *reduction* the loop tolerates
  (conditionally stable loops, open-loop-unstable plants); the one closest to
  0 dB is ``gain_reduction_margin_db``.  When the closed loop is unstable,
  ``gain_margin_db`` is the phase crossing closest to 0 dB, whatever its sign.
* ``delay_margin_s`` is the smallest extra pure delay that makes the loop
  unstable: min over gain crossings of ``(PM mod 360°) / ω`` (0 when the loop
  is already unstable).
* ``modulus_margin`` is min |1 + T| over the band, ``peak_sensitivity`` its
  inverse Ms, both with their frequency.  A minimum at the top edge of the
  band is reported as found (not as infinity), with a warning if |1 + T| is
  still falling there.
* Closed-loop stability comes from the Nyquist criterion: the winding of
  1 + T around 0, counted from the dense evaluation (delay included exactly),
  plus the contributions of the low-frequency asymptote (``n`` integrators)
  and the high-frequency end, ``Z = P - N`` with ``P`` the number of
  open-loop right-half-plane poles the caller states.

From a model the loop is evaluated on a dense log grid that is refined until
neighbouring points differ by little in phase and gain, and every crossing is
then polished with Brent's method on log f.  From data, crossings are
interpolated linearly in log f on dB and unwrapped phase, and warnings say
where the sweep is too coarse to trust the numbers.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np
from scipy import optimize

from benchfit.errors import InputError
from benchfit.fileio import as_float
from benchfit.loop.crossings import main_score, nyquist_count, slope_integrators, to_db, wrap180
from benchfit.loop.densegrid import LIVE_DB, MAX_POINTS, LoopFn, dense_grid, model_band
from benchfit.loop.marginsbatch import margins_batch
from benchfit.provenance import Provenance

__all__ = ["Margins", "margins_from_data", "margins_of_sweep", "margins_from_model",
           "margins_of_model", "margins_batch", "model_band"]

# the text report lists phase crossings with a larger GM on one summary line
_QUIET_GM_DB = 60.0
# data: a crossing whose neighbouring points differ more than this is "coarse"
_COARSE_PHASE_DEG = 15.0
_COARSE_DB = 6.0
_JUMP_PHASE_DEG = 45.0           # anywhere in the band: possible under-sampled resonance


# ----------------------------------------------------------------------------- result
@dataclass(frozen=True)
class Margins:
    """Stability margins of one loop gain.

    Attributes
    ----------
    phase_margin_deg
        Phase margin at the main crossover, degrees, in (-180, 180];
        inf when |T| never crosses 1, nan when the band does not reach it.
    crossover_hz
        Main gain crossover frequency, Hz (nan if none).
    gain_margin_db
        Smallest positive gain margin, dB (inf if none); see module notes.
    phase_crossover_hz
        Frequency of the phase crossing that gives ``gain_margin_db``, Hz.
    delay_margin_s
        Smallest extra delay that destabilises the loop, s.
    modulus_margin
        min |1 + T| over the band (dimensionless).
    modulus_freq_hz
        Where that minimum lies, Hz.
    peak_sensitivity
        Ms = 1 / modulus_margin.
    crossings
        Every crossing: dicts with ``kind`` ("gain" or "phase"), ``freq_hz``,
        ``value`` (PM in degrees for gain crossings, GM in dB for phase
        crossings), ``direction`` ("down"/"up": the way |T| or ∠T goes) and
        ``main`` (True for the main crossover).
    gain_reduction_margin_db
        Negative gain margin closest to 0 dB (-inf if none).
    min_phase_margin_deg, min_phase_margin_hz
        The phase margin of smallest magnitude over *all* gain crossings (the
        crossing that comes closest to -1), signed, and where it is; equal
        to the main one for a loop with a single crossing.
    open_loop_unstable_poles
        P, as stated by the caller (or counted from the model).
    closed_loop_stable
        Nyquist verdict.
    encirclements
        Counter-clockwise encirclements of -1 by T (N; Z = P - N).
    integrators
        Number of open-loop poles at s = 0 used for the count.
    f_min_hz, f_max_hz
        The band examined.
    warnings
        Plain-language warnings.
    provenance
        What produced this result.
    """

    phase_margin_deg: float
    crossover_hz: float
    gain_margin_db: float
    phase_crossover_hz: float
    delay_margin_s: float
    modulus_margin: float
    modulus_freq_hz: float
    peak_sensitivity: float
    crossings: tuple[dict[str, Any], ...]
    gain_reduction_margin_db: float = -math.inf
    min_phase_margin_deg: float = math.inf
    min_phase_margin_hz: float = math.nan
    open_loop_unstable_poles: int = 0
    closed_loop_stable: bool = True
    encirclements: int = 0
    integrators: int = 0
    f_min_hz: float = math.nan
    f_max_hz: float = math.nan
    warnings: tuple[str, ...] = ()
    provenance: Provenance = field(default_factory=lambda: Provenance(step="margins"))

    _FLOATS = ("phase_margin_deg", "crossover_hz", "gain_margin_db", "phase_crossover_hz",
               "delay_margin_s", "modulus_margin", "modulus_freq_hz", "peak_sensitivity",
               "gain_reduction_margin_db", "min_phase_margin_deg", "min_phase_margin_hz",
               "f_min_hz", "f_max_hz")

    def to_dict(self) -> dict[str, Any]:
        d: dict[str, Any] = {"kind": "margins"}
        for k in self._FLOATS:
            d[k] = float(getattr(self, k))
        d["crossings"] = [dict(c) for c in self.crossings]
        d["open_loop_unstable_poles"] = int(self.open_loop_unstable_poles)
        d["closed_loop_stable"] = bool(self.closed_loop_stable)
        d["encirclements"] = int(self.encirclements)
        d["integrators"] = int(self.integrators)
        d["warnings"] = list(self.warnings)
        d["provenance"] = self.provenance.to_dict()
        return d

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> Margins:
        if not isinstance(d, dict) or "phase_margin_deg" not in d:
            raise InputError("expected a margins object with 'phase_margin_deg'")
        kw: dict[str, Any] = {k: as_float(d.get(k)) for k in cls._FLOATS if k in d}
        crossings = []
        for c in d.get("crossings", []):
            c = dict(c)
            c["freq_hz"] = as_float(c.get("freq_hz"))
            c["value"] = as_float(c.get("value"))
            crossings.append(c)
        return cls(
            crossings=tuple(crossings),
            open_loop_unstable_poles=int(d.get("open_loop_unstable_poles", 0)),
            closed_loop_stable=bool(d.get("closed_loop_stable", True)),
            encirclements=int(d.get("encirclements", 0)),
            integrators=int(d.get("integrators", 0)),
            warnings=tuple(str(w) for w in d.get("warnings", ())),
            provenance=Provenance.from_dict(d.get("provenance")),
            **kw,
        )

    def to_json(self, path) -> None:
        from benchfit.fileio import write_json_atomic

        write_json_atomic(path, self.to_dict())

    @classmethod
    def from_json(cls, path) -> Margins:
        from benchfit.fileio import read_json

        return cls.from_dict(read_json(path))

    def report(self) -> str:
        """A short human-readable summary."""
        def num(v: float, fmt: str, unit: str) -> str:
            if math.isnan(v):
                return "n/a"
            if math.isinf(v):
                return "none" if v > 0 else "-inf"
            return f"{v:{fmt}} {unit}".rstrip()

        lines = [
            f"phase margin    {num(self.phase_margin_deg, '.1f', 'deg')} at {num(self.crossover_hz, '.4g', 'Hz')}",
            f"gain margin     {num(self.gain_margin_db, '.1f', 'dB')} at {num(self.phase_crossover_hz, '.4g', 'Hz')}",
        ]
        if math.isfinite(self.gain_reduction_margin_db):
            lines.append(f"gain reduction  {self.gain_reduction_margin_db:.1f} dB (gain may fall this much)")
        lines += [
            f"delay margin    {num(self.delay_margin_s, '.4g', 's')}",
            f"modulus margin  {num(self.modulus_margin, '.3f', '')} (Ms {num(self.peak_sensitivity, '.3f', '')}, "
            f"{num(20 * math.log10(self.peak_sensitivity) if self.peak_sensitivity > 0 else math.nan, '.1f', 'dB')}) "
            f"at {num(self.modulus_freq_hz, '.4g', 'Hz')}",
            f"closed loop     {'stable' if self.closed_loop_stable else 'UNSTABLE'} "
            f"(open-loop RHP poles {self.open_loop_unstable_poles}, encirclements of -1: {self.encirclements})",
            "crossings:",
        ]
        quiet = []      # phase crossings far below 0 dB (a delay's spinning phase): summarised
        for c in self.crossings:
            tag = " (main)" if c.get("main") else ""
            if c["kind"] == "gain":
                lines.append(f"  gain  {c['freq_hz']:12.5g} Hz  PM {c['value']:7.1f} deg{tag}")
            elif c["value"] > _QUIET_GM_DB:
                quiet.append(c)
            else:
                lines.append(f"  phase {c['freq_hz']:12.5g} Hz  GM {c['value']:7.1f} dB")
        if quiet:
            lines.append(f"  ... and {len(quiet)} phase crossing(s) with GM above {_QUIET_GM_DB:g} dB "
                         f"between {quiet[0]['freq_hz']:.4g} and {quiet[-1]['freq_hz']:.4g} Hz "
                         "(all listed in --json)")
        if not self.crossings:
            lines.append("  none in the band")
        for w in self.warnings:
            lines.append(f"warning: {w}")
        return "\n".join(lines)



# ----------------------------------------------------------------------------- core
@dataclass
class _Curve:
    f: np.ndarray          # Hz, increasing
    T: np.ndarray          # complex
    phase: np.ndarray      # unwrapped degrees
    exact: LoopFn | None   # the model (None for data)


def _unwrapped_phase(T: np.ndarray) -> np.ndarray:
    steps = np.angle(T[1:] / T[:-1])
    return np.degrees(np.concatenate([[np.angle(T[0])], np.angle(T[0]) + np.cumsum(steps)]))


def _gain_crossing(c: _Curve, i: int) -> tuple[float, float]:
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
        return _gain_crossing(_Curve(c.f, c.T, c.phase, None), i)
    Tx = fn(np.array([10 ** x]))[0]
    return 10 ** x, float(pi + np.degrees(np.angle(Tx / Ti)))


def _phase_crossing(c: _Curve, i: int, target: float) -> tuple[float, float]:
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
        return _phase_crossing(_Curve(c.f, c.T, c.phase, None), i, target)
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


def _analyse(c: _Curve, *, unstable: int, integrators: int | None, data: bool,
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
                warnings.append(
                    f"phase crossing at {fp:.4g} Hz: the sweep is coarse there; its gain margin "
                    f"({-gdb:.1f} dB) is uncertain")

    # --- resolution of the whole sweep (data): under-sampled resonances
    if data:
        live = np.maximum(db[:-1], db[1:]) > -20.0
        jumps = np.flatnonzero(live & (pstep > _JUMP_PHASE_DEG))
        if jumps.size:
            j = int(jumps[np.argmax(pstep[jumps])])
            warnings.append(
                f"the phase jumps {pstep[j]:.0f} deg between {f[j]:.4g} and {f[j + 1]:.4g} Hz "
                f"({jumps.size} such gap(s)): a resonance is under-sampled; crossings and margins "
                "near there cannot be trusted; sweep with more points per decade")
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
    n_int = int(slope_integrators(x, T[None, :])[0]) if integrators is None else int(integrators)
    if n_int == 0 and db[0] < 0 and integrators is None and len(x) > 1 and db[1] < db[0] - 0.1 * (x[1] - x[0]) * 20:
        warnings.append(f"the loop gain is below 0 dB at the bottom of the band ({f[0]:.4g} Hz) "
                        "and rising towards lower frequencies: a crossing may lie below the band")
    N, Z, dev0, devinf = nyquist_count(T[None, :], np.array([n_int]), unstable)
    N, Z = int(N[0]), int(Z[0])
    stable = Z == 0
    if float(dev0[0]) > 60.0:
        warnings.append(f"at the bottom of the band ({f[0]:.4g} Hz) the loop phase is still "
                        f"{float(dev0[0]):.0f} deg from its low-frequency asymptote: the stability "
                        "verdict assumes nothing happens below the band; extend it downwards")
    if db[-1] > 0 or float(devinf[0]) > 60.0:
        warnings.append("the stability verdict assumes |T| stays below 1 above the band")
    if data and np.any(np.abs(np.diff(np.degrees(np.unwrap(np.angle(1 + T))))) > 90.0):
        warnings.append("1+T turns more than 90 deg between neighbouring points: the sweep is too "
                        "coarse near -1 for a sure encirclement count")
    if not stable:
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
    if n_int == 0 and float(dev0[0]) < 1.0 and abs(float(wrap180(ph[0] + 180.0))) < 1.0:
        g0 = -float(db[0])
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
    if not stable:
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
        open_loop_unstable_poles=int(unstable), closed_loop_stable=bool(stable),
        encirclements=N, integrators=n_int, f_min_hz=float(f[0]), f_max_hz=float(f[-1]),
        warnings=tuple(dict.fromkeys(warnings)), provenance=provenance,
    )


# ----------------------------------------------------------------------------- data
def margins_from_data(freq_hz, loop_response, *, unstable_open_loop_poles: int = 0,
                      integrators: int | None = None,
                      provenance: Provenance | None = None) -> Margins:
    """Margins of a sampled loop gain (a measured or computed sweep).

    Crossings are interpolated linearly in log-frequency on magnitude (dB)
    and unwrapped phase.  Warnings say where the sweep is too coarse (phase
    steps of more than 15° next to a crossing, 45° anywhere the gain is above
    -20 dB, one-point peaks) or does not reach the crossover.

    Parameters
    ----------
    freq_hz
        Frequencies in Hz, strictly increasing and positive.
    loop_response
        Complex loop gain T (return ratio) at those frequencies.
    unstable_open_loop_poles
        Number of open-loop right-half-plane poles P (for the Nyquist count).
    integrators
        Number of open-loop poles at s = 0; estimated from the low-end slope
        when None.
    provenance
        Provenance of the data; the result's provenance derives from it.

    Returns
    -------
    Margins
    """
    f = np.asarray(freq_hz, dtype=float).reshape(-1)
    T = np.asarray(loop_response, dtype=complex).reshape(-1)
    if f.shape != T.shape or f.size < 3:
        raise InputError(f"margins need at least 3 points with one response each; found {f.size} "
                         f"frequencies and {T.size} responses")
    if not (np.all(np.isfinite(f)) and np.all(f > 0) and np.all(np.diff(f) > 0)):
        raise InputError("frequencies must be positive, finite and strictly increasing")
    if not np.all(np.isfinite(T)) or np.any(T == 0):
        raise InputError("the loop response must be finite and non-zero at every point")
    _check_poles(unstable_open_loop_poles)
    prov = (provenance or Provenance(step="data")).derive(
        "margins", {"from": "data", "unstable_open_loop_poles": int(unstable_open_loop_poles)})
    curve = _Curve(f=f, T=T, phase=np.degrees(np.unwrap(np.angle(T))), exact=None)
    return _analyse(curve, unstable=int(unstable_open_loop_poles), integrators=integrators,
                    data=True, extra_warnings=(), provenance=prov)


def margins_of_sweep(resp, *, unstable_open_loop_poles: int = 0) -> Margins:
    """Margins of a :class:`~benchfit.data.FrequencyResponse` holding a loop gain."""
    return margins_from_data(resp.freq_hz, resp.response,
                             unstable_open_loop_poles=unstable_open_loop_poles,
                             provenance=resp.provenance)


def _check_poles(p) -> None:
    if int(p) != p or p < 0:
        raise InputError(f"number of unstable open-loop poles must be an integer >= 0, found {p}",
                         source="--unstable-poles")


# ----------------------------------------------------------------------------- models

def margins_from_model(loop_fn: LoopFn, f_min_hz: float, f_max_hz: float, *,
                       unstable_open_loop_poles: int = 0, delay_s: float = 0.0,
                       integrators: int | None = None, hint_freqs_hz: Sequence[float] = (),
                       points_per_decade: int = 100,
                       provenance: Provenance | None = None) -> Margins:
    """Margins of a loop gain given as a function of frequency.

    The loop is evaluated on a log grid (``points_per_decade``, plus clusters
    around ``hint_freqs_hz``), refined by bisection until neighbouring points
    differ by at most 2° in phase (where |T| > -60 dB), 1 dB in gain (within
    ±40 dB of 0 dB) and 5° in ∠(1+T); every crossing is then polished with
    Brent's method on log f and the modulus margin with a bounded minimiser.
    Phase crossings where |T| < -60 dB (gain margin above 60 dB, e.g. a
    delay's phase spinning far above crossover) are not resolved and not listed.

    Parameters
    ----------
    loop_fn
        Maps an array of frequencies (Hz) to the complex loop gain T.
    f_min_hz, f_max_hz
        Band to examine.  For a sure stability verdict, start it where the
        loop has reached its low-frequency asymptote and end it where |T| < 1.
    unstable_open_loop_poles
        Number of open-loop right-half-plane poles P.
    delay_s
        An extra pure delay multiplied into the loop, exactly (e^(-sτ)).
    integrators
        Open-loop poles at s = 0 (estimated from the low-end slope when None).
    hint_freqs_hz
        Frequencies of known singularities (lightly damped poles, zeros) to
        sample finely.
    points_per_decade
        Initial grid density.
    provenance
        What the loop came from.

    Returns
    -------
    Margins
    """
    f_min, f_max = float(f_min_hz), float(f_max_hz)
    if not (0 < f_min < f_max and math.isfinite(f_max)):
        raise InputError(f"band {f_min_hz}..{f_max_hz} Hz: expected 0 < f_min < f_max")
    tau = float(delay_s)
    if not math.isfinite(tau) or tau < 0:
        raise InputError(f"delay must be finite and >= 0 s, found {delay_s}")
    _check_poles(unstable_open_loop_poles)

    def fn(freq):
        T = np.asarray(loop_fn(freq), dtype=complex)
        return T * np.exp(-2j * np.pi * freq * tau) if tau else T

    f, T, capped = dense_grid(fn, f_min, f_max, points_per_decade, hint_freqs_hz)
    extra = []
    if capped:
        extra.append(f"the loop could not be resolved with {MAX_POINTS} points; narrow the band")
    prov = (provenance or Provenance(step="model")).derive(
        "margins", {"from": "model", "f_min_hz": f_min, "f_max_hz": f_max, "delay_s": tau,
                    "unstable_open_loop_poles": int(unstable_open_loop_poles), "points": int(f.size)})
    curve = _Curve(f=f, T=T, phase=_unwrapped_phase(T), exact=fn)
    return _analyse(curve, unstable=int(unstable_open_loop_poles), integrators=integrators,
                    data=False, extra_warnings=extra, provenance=prov)



def margins_of_model(model, *, f_min_hz: float | None = None, f_max_hz: float | None = None,
                     unstable_open_loop_poles: int | None = None) -> Margins:
    """Margins of a loop gain held as a :class:`~benchfit.fitting.model.PlantModel`.

    The band, the number of integrators, the right-half-plane pole count and
    the frequencies to sample finely all come from the model's poles and
    zeros; its delay is applied exactly.
    """
    lo, hi = model_band(model)
    lo = lo if f_min_hz is None else float(f_min_hz)
    hi = hi if f_max_hz is None else float(f_max_hz)
    scale = max(1.0, float(np.max(np.abs(model.poles)))) if model.poles.size else 1.0
    P = int(np.sum(model.poles.real > 1e-12 * scale)) if unstable_open_loop_poles is None \
        else int(unstable_open_loop_poles)
    n_int = int(np.sum(model.poles == 0))
    hints = np.abs(np.concatenate([model.poles, model.zeros])) / (2 * np.pi)
    rational = type(model)(zeros=model.zeros, poles=model.poles, k=model.k, delay_s=0.0,
                           provenance=model.provenance)
    m = margins_from_model(rational.response, lo, hi, unstable_open_loop_poles=P,
                           delay_s=model.delay_s, integrators=n_int,
                           hint_freqs_hz=hints[hints > 0], provenance=model.provenance)
    p = model.poles
    on_axis = p[(p != 0) & (np.abs(p.real) <= 1e-12 * np.maximum(np.abs(p), 1.0)) & (p.imag > 0)]
    if on_axis.size:
        where = ", ".join(f"{v:.4g}" for v in np.abs(on_axis) / (2 * np.pi))
        m = replace(m, warnings=m.warnings + (
            f"the loop has undamped poles on the imaginary axis ({where} Hz): the encirclement "
            "count does not go around them, so the stability verdict is not reliable",))
    return m

