"""Placing an op-amp stage's feedback network on the measured Aol for a phase-margin target.

The gain resistors come first: Rg is the impedance level (``r_level``) and
Rf follows from the closed-loop gain (1 + Rf/Rg non-inverting, −Rf/Rg
inverting).  Each network then has one placement variable, swept on a log
grid with every row's margins computed at once
(:func:`benchfit.loop.margins.margins_batch`), and the sweep's crossing of
the phase-margin target is refined by bisection:

===========  =================================  =============================================
network      swept                              rule of the sweep
===========  =================================  =============================================
lead         zero of Cf·Rf, high to low         the smallest Cf that reaches the target
lag          high-frequency noise gain H        the smallest H (Rn = Rf/(H − 1/β0)); Cn puts the
                                                Rn–Cn corner a decade below where |Aol| = H
lag-lead     crossover fc, high to low          1/β falls at −20 dB/decade through |Aol(fc)|:
                                                lead pole at fc/4, plateau H = 4·|Aol(fc)|,
                                                lag corner at fc/20 (a 20 dB/decade closure
                                                where Aol falls at −40)
isolation    Cf (op-amp pin to V-), small up    the smallest Cf; Riso the smallest of 1 Ω..1 kΩ
                                                (E3 steps) that reaches the target
snubber      Rs, low to high                    Cs the smallest of 1, 2.2, 4.7, 10 × CL that reaches
                                                the target; among Rs crossings the highest crossover
===========  =================================  =============================================

When even the end of the sweep leaves more margin than asked (a benign
plant), that end is kept and ``on_target`` is False; when no setting
reaches the target, a :class:`DesignError` says how far the network got.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from benchfit.errors import DesignError, InputError
from benchfit.loop import eseries
from benchfit.loop.loopgain import LoopPlant
from benchfit.loop.passrules import margins_meet
from benchfit.loop.stage_load import StageLoad
from benchfit.loop.stage_networks import StageNetwork
from benchfit.loop.stage_refine import exact_margins, exact_pm, refine_on_exact
from benchfit.loop.targets import Targets

#: Points of each placement sweep.
SWEEP_POINTS = 90
#: Bisection steps refining a crossing of the target.
BISECT_STEPS = 30
#: How far above the target the exact phase margin of a placement may lie and count as on
#: target, degrees (the exact bisection lands within ~1e-9° where the margin is continuous).
ON_TARGET_DEG = 0.05
#: Closed-loop DC gain error allowed after snapping (the issue's 1 %).
GAIN_TOL = 0.01
#: Lag-lead shape: lead pole at fc/LL_M, plateau LL_M·|Aol(fc)|, lag corner at fc/(5·LL_M).
LL_M = 4.0
ISO_RISO = (1.0, 2.2, 4.7, 10.0, 22.0, 47.0, 100.0, 220.0, 470.0, 1000.0)
SNUB_CS = (1.0, 2.2, 4.7, 10.0)


@dataclass(frozen=True)
class StageSynthesis:
    """How a stage network was placed.

    Attributes
    ----------
    network
        The ideal network.
    swept
        Name of the placement variable and its final value.
    on_target
        True when the ideal parts meet the targets on the exact margins with a phase
        margin at most :data:`ON_TARGET_DEG` above the target.
    pm_deg, crossover_hz
        Ideal margins (exact, smallest PM over the gain crossings).
    notes
        Plain-language notes (the rule used, costs).
    """

    network: StageNetwork
    swept: dict[str, float]
    on_target: bool
    pm_deg: float
    crossover_hz: float
    notes: tuple[str, ...] = field(default_factory=tuple)

    def to_dict(self) -> dict[str, Any]:
        return {"network": self.network.to_dict(), "swept": dict(self.swept),
                "on_target": self.on_target, "pm_deg": self.pm_deg,
                "crossover_hz": self.crossover_hz, "notes": list(self.notes)}

    @classmethod
    def from_dict(cls, d: dict[str, Any] | None) -> StageSynthesis | None:
        if not d:
            return None
        return cls(network=StageNetwork.from_dict(d["network"]), swept=dict(d["swept"]),
                   on_target=bool(d["on_target"]), pm_deg=float(d["pm_deg"]),
                   crossover_hz=float(d["crossover_hz"]), notes=tuple(d.get("notes", ())))


def gain_resistors(gain: float, stage: str, r_level: float) -> dict[str, float]:
    """Ideal Rf, Rg for the closed-loop gain (Rg = ``r_level``; a follower has no Rg)."""
    g = float(gain)
    if not math.isfinite(g) or g == 0:
        raise InputError(f"closed-loop gain {gain!r}; expected a finite non-zero gain",
                         source="--closed-loop-gain")
    if stage == "noninverting":
        if g < 1.0:
            raise InputError(f"closed-loop gain {g:g}: a non-inverting stage has a gain >= 1",
                             source="--closed-loop-gain")
        return {"Rf": r_level} if g == 1.0 else {"Rf": (g - 1.0) * r_level, "Rg": r_level}
    return {"Rf": abs(g) * r_level, "Rg": r_level}


def snapped_gain_pairs(ideal: dict[str, float], series: str, count: int = 3) -> list[dict[str, float]]:
    """The ``count`` pairs of series values (Rg within a decade of its ideal) whose ratio
    Rf/Rg is nearest the ideal one, best first."""
    if "Rg" not in ideal:
        return [{"Rf": float(eseries.snap(ideal["Rf"], series))}]
    ratio = ideal["Rf"] / ideal["Rg"]
    dec = math.floor(math.log10(ideal["Rg"]))
    rg = np.concatenate([eseries.series_values(series) * 10.0 ** d for d in (dec - 1, dec, dec + 1)])
    rg = eseries.snap(rg, series)
    keep = (rg >= ideal["Rg"] / 3) & (rg <= ideal["Rg"] * 3)
    rg = rg[keep]
    rf = eseries.snap(rg * ratio, series)
    err = np.abs(np.log((rf / rg) / ratio)) + 1e-3 * np.abs(np.log(rg / ideal["Rg"]))
    order = np.argsort(err)[:count]
    return [{"Rf": float(rf[i]), "Rg": float(rg[i])} for i in order]


#: Points per decade of a model's grid (denser than the converter's: the margins of a
#: stage must land within a fraction of a degree of the exact ones).
STAGE_GRID_PER_DECADE = 150


def stage_grid(lp: LoopPlant) -> np.ndarray:
    """Frequencies the stage loop is judged on: the sweep's own, or the model's band."""
    if lp.is_data:
        return lp.grid()
    lo, hi = lp.band_hz
    n = int(np.ceil(np.log10(hi / lo) * STAGE_GRID_PER_DECADE)) + 1
    return np.logspace(np.log10(lo), np.log10(hi), n)


def _margins(lp: LoopPlant, f: np.ndarray, net: StageNetwork, values: dict[str, Any] | None):
    """(PM, GM, stable, crossover) of every row; PM is the smallest over all gain crossings."""
    from benchfit.loop.margins import margins_batch

    t = lp.response(f)[None, :] * net.response(f, None, values)
    out = margins_batch(f, t, unstable_open_loop_poles=lp.unstable_poles)
    pm = np.nan_to_num(np.asarray(out["pm_deg"], dtype=float), nan=-np.inf)
    # every gain crossing must meet the target, not only the main one (a loop whose |T|
    # dips below 1 and rises again has a second crossing with its own margin)
    worst = np.asarray(out["min_pm_deg"], dtype=float)
    pm = np.where(np.isfinite(worst), np.minimum(pm, worst), pm)
    return pm, np.asarray(out["gm_db"], dtype=float), np.asarray(out["stable"], dtype=bool), \
        np.asarray(out["crossover_hz"], dtype=float)


def _aol_mag_at(lp: LoopPlant, f: np.ndarray, fq: np.ndarray) -> np.ndarray:
    mag = np.abs(lp.response(f))
    return np.exp(np.interp(np.log(fq), np.log(f), np.log(np.where(mag > 0, mag, 1e-300))))


def _freq_where(lp: LoopPlant, f: np.ndarray, level: np.ndarray) -> np.ndarray:
    """Lowest frequency where |Aol| falls to ``level`` (top of the band if never)."""
    mag = np.abs(lp.response(f))
    out = np.empty(np.size(level))
    for k, lv in enumerate(np.atleast_1d(level)):
        idx = np.flatnonzero(mag <= lv)
        out[k] = f[idx[0]] if idx.size else f[-1]
    return out


class _Family:
    """Part values of one network as functions of the swept variable (arrays)."""

    def __init__(self, kind: str, base: dict[str, float], stage: str, load: StageLoad,
                 lag_at: str, lp: LoopPlant, f: np.ndarray, option: float | None) -> None:
        self.kind, self.base, self.stage, self.load, self.lag_at = kind, base, stage, load, lag_at
        self.lp, self.f, self.option = lp, f, option
        self.g0 = 1.0 + (base["Rf"] / base["Rg"] if "Rg" in base else 0.0)
        self.net = StageNetwork(kind, {**base, **self.values(np.array([self.range()[0]]), scalar=True)},
                                stage, load, lag_at)

    def range(self) -> tuple[float, float, str, bool]:
        """(start, end, name, prefer_start): the sweep runs from start to end on a log scale."""
        f = self.f
        if self.kind == "lead":
            return f[-1], f[0], "lead_zero_hz", True
        if self.kind == "lag":
            top = float(np.max(np.abs(self.lp.response(f))))
            return self.g0 * 1.02, max(top, self.g0 * 1.05), "noise_gain_hf", True
        if self.kind == "lag-lead":  # from where the plateau 4·|Aol| would fall to 1/β0
            top = float(_freq_where(self.lp, f, np.array([self.g0 / LL_M]))[0])
            return top, f[0] * LL_M * 5, "crossover_hz", True
        if self.kind == "isolation":
            return 1e-13, 1e-6, "cf_f", True
        return 1e-3, 1e3, "rs_ohm", False

    def values(self, x: np.ndarray, scalar: bool = False) -> dict[str, Any]:
        x = np.asarray(x, dtype=float)
        rf = self.base["Rf"]
        out: dict[str, Any]
        if self.kind == "lead":
            out = {"Cf": 1.0 / (2 * np.pi * rf * x)}
        elif self.kind == "lag":
            rn = rf / (x - self.g0)
            fc = _freq_where(self.lp, self.f, x)
            out = {"Rn": rn, "Cn": 1.0 / (2 * np.pi * rn * fc / 10.0)}
        elif self.kind == "lag-lead":
            h = np.maximum(LL_M * _aol_mag_at(self.lp, self.f, x), self.g0 * 1.02)
            rn = rf / (h - self.g0)
            out = {"Cf": 1.0 / (2 * np.pi * rf * x / LL_M),
                   "Rn": rn, "Cn": 1.0 / (2 * np.pi * rn * x / (5 * LL_M))}
        elif self.kind == "isolation":
            out = {"Cf": x, "Riso": np.full_like(x, self.option)}
        else:
            out = {"Rs": x, "Cs": np.full_like(x, self.option * self.load.c_f)}
        if scalar:
            return {k: float(np.ravel(v)[0]) for k, v in out.items()}
        return {k: np.asarray(v, dtype=float).reshape(-1, 1) for k, v in out.items()}

    def margins(self, x: np.ndarray):
        return _margins(self.lp, self.f, self.net, self.values(x))

    def network_at(self, x: float) -> StageNetwork:
        """The network at one setting ``x`` of the swept variable."""
        return StageNetwork(self.kind, {**self.base, **self.values(np.array([x]), scalar=True)},
                            self.stage, self.load, self.lag_at)


def _ok(pm, gm, stable, targets: Targets) -> np.ndarray:
    return stable & (pm >= targets.phase_margin_deg) & (gm >= targets.gain_margin_db)


def _solve(fam: _Family, targets: Targets) -> tuple[float, float, float, bool] | None:
    """(x, pm, crossover, on_target) of the preferred crossing of the target, or None.

    The sweep and its bisection judge the grid margins; the chosen crossing is
    then refined on the exact margins (:func:`benchfit.loop.stage_refine.refine_on_exact`),
    and ``pm``, ``crossover`` and ``on_target`` are the exact figures: on target
    when the exact margins meet the targets and the phase margin lies within
    :data:`ON_TARGET_DEG` above the target.
    """
    start, end, _, _ = fam.range()
    x = np.logspace(math.log10(start), math.log10(end), SWEEP_POINTS)
    pm, gm, st, fc = fam.margins(x)
    ok = _ok(pm, gm, st, targets)
    if not ok.any():
        return None
    cands = []
    for i in range(len(x) - 1):
        if ok[i] != ok[i + 1]:
            lo, hi = (i, i + 1) if not ok[i] else (i + 1, i)  # lo fails, hi passes
            a, b = math.log10(x[lo]), math.log10(x[hi])
            for _ in range(BISECT_STEPS):
                m = 0.5 * (a + b)
                r = fam.margins(np.array([10 ** m]))
                if _ok(*r[:3], targets)[0]:
                    b = m
                else:
                    a = m
            r = fam.margins(np.array([10 ** b]))
            cands.append((10 ** b, float(r[0][0]), float(r[3][0]), i, a, b))
    if not cands:  # passes everywhere: keep the preferred end
        j = 0 if fam.range()[3] else len(x) - 1
        m = exact_margins(fam.lp, fam.network_at(float(x[j])))
        return float(x[j]), exact_pm(m), float(m.crossover_hz), False
    if fam.kind == "snubber":
        best = max(cands, key=lambda c: c[2])
    else:
        best = min(cands, key=lambda c: c[3])  # the first crossing from the preferred start
    step = abs(math.log10(x[1] / x[0]))
    xb, m, _ = refine_on_exact(fam.network_at, fam.lp, targets, best[4], best[5], step,
                               (math.log10(start), math.log10(end)))
    pm_x = exact_pm(m)
    on = margins_meet(m, targets) and pm_x - targets.phase_margin_deg <= ON_TARGET_DEG
    return xb, pm_x, float(m.crossover_hz), bool(on)


NOTES = {
    "lead": "Cf across Rf: 1/β falls from 1/β0 toward 1 above Rf·Cf; for a non-inverting stage "
            "the signal gain falls with it (the closed-loop bandwidth is set by Cf)",
    "lag": "Rn–Cn raises the noise gain 1/β to H at high frequency so 1/β meets Aol lower down; "
           "cost: loop gain and bandwidth drop by H·β0, input noise is amplified by H",
    "lag-lead": "lag raises 1/β, lead makes it fall at −20 dB/decade through Aol: a 20 dB/decade "
                "closure where Aol falls at −40",
    "isolation": "Riso isolates the load capacitor; Rf from the load keeps the DC gain exact, Cf "
                 "from the op-amp pin closes the loop at high frequency; cost: Riso in series with "
                 "the load at high frequency (load steps)",
    "snubber": "Rs–Cs to ground adds the zero a low-ESR capacitor lacks; cost: a second large "
               "capacitor and Rs's dissipation",
    "plain": "resistive feedback only",
}


def lag_cost_note(net: StageNetwork) -> str:
    """The lag network's cost to the signal gain, in words."""
    h = net.dc_noise_gain() + net.parts["Rf"] / net.parts["Rn"]
    if net.stage == "noninverting" and net.lag_at == "across":
        return (f"lag across the inputs: the ideal signal gain stays {net.ideal_gain():.4g} at all "
                f"frequencies (no current flows in Rn–Cn when V+ = V-) while the noise gain rises "
                f"to {h:.4g}; the source must drive Rn–Cn")
    return (f"lag to ground: the noise gain rises to {h:.4g} above the Rn–Cn corner"
            + (f" and so does the signal gain (from {net.ideal_gain():.4g})"
               if net.stage == "noninverting" else "; the inverting signal gain −Rf/Rg is kept (V+ is at "
               "ground, so across the inputs is the same place)"))


def synthesize_stage(kind: str, lp: LoopPlant, targets: Targets, *, gain: float,
                     stage: str = "noninverting", load: StageLoad | None = None,
                     r_level: float = 10e3, lag_at: str = "across") -> StageSynthesis:
    """Place one network on the Aol in ``lp`` for the phase-margin target.

    Raises
    ------
    DesignError
        When no setting of the network reaches the targets (the message says
        the best phase margin reached).
    """
    load = load or StageLoad()
    base = gain_resistors(gain, stage, r_level)
    f = stage_grid(lp)
    if kind == "plain":
        net = StageNetwork("plain", base, stage, load, lag_at)
        m = exact_margins(lp, net)
        if not margins_meet(m, targets):
            raise DesignError(f"plain feedback leaves PM {exact_pm(m):.2f}° (GM "
                              f"{m.gain_margin_db:.2f} dB, exact margins); the target is "
                              f"{targets.phase_margin_deg:g}°")
        return StageSynthesis(net, {}, False, exact_pm(m), float(m.crossover_hz), (NOTES["plain"],))
    options = {"isolation": ISO_RISO, "snubber": SNUB_CS}.get(kind, (None,))
    best_pm = best_gm = -math.inf
    best_at: tuple[_Family, float] | None = None
    found: list[StageSynthesis] = []
    for opt in options:
        fam = _Family(kind, base, stage, load, lag_at, lp, f, opt)
        got = _solve(fam, targets)
        if got is None:
            s0, s1, _, _ = fam.range()
            xs = np.logspace(math.log10(s0), math.log10(s1), SWEEP_POINTS)
            pm_s, gm_s, st_s, _ = fam.margins(xs)
            keeps_gm = st_s & (gm_s >= targets.gain_margin_db)  # the PM reachable with the GM kept
            pm_k = np.where(keeps_gm, pm_s, -np.inf)
            if float(np.max(pm_k)) > best_pm:
                best_pm, best_at = float(np.max(pm_k)), (fam, float(xs[int(np.argmax(pm_k))]))
            best_gm = max(best_gm, float(np.max(np.where(st_s, gm_s, -np.inf))))
            continue
        x, pm, fc, on = got
        net = fam.network_at(x)
        notes = [NOTES[kind]]
        if kind in ("lag", "lag-lead"):
            notes.append(lag_cost_note(net))
        if not on:
            m = exact_margins(lp, net)
            verdict = "meets" if margins_meet(m, targets) else "MISSES"
            notes.append(f"{kind}: no setting lands on the {targets.phase_margin_deg:g}° target "
                         f"(the margin jumps past it, or every setting leaves more); the kept "
                         f"setting {verdict} it: PM {pm:.3f}°, GM {m.gain_margin_db:.2f} dB "
                         "(exact margins)")
        found.append(StageSynthesis(net, {fam.range()[2]: x} | ({"option": opt} if opt else {}),
                                    on, pm, fc, tuple(notes)))
        if on:
            break
    if found:
        return next((s for s in found if s.on_target), found[0])
    if best_gm == -math.inf:
        raise DesignError(f"the {kind} network leaves the loop unstable at every setting tried on "
                          "this plant (Nyquist count); choose another network")
    if not math.isfinite(best_pm):
        raise DesignError(f"the {kind} network keeps no {targets.gain_margin_db:g} dB gain margin on "
                          f"this plant (at most {best_gm:.1f} dB stable); lower --gain-margin or "
                          "choose another network")
    fam, x_best = best_at
    m = exact_margins(lp, fam.network_at(x_best))
    raise DesignError(f"the {kind} network reaches at most PM {exact_pm(m):.2f}° on this plant "
                      f"(exact margins at the sweep's best setting, GM {m.gain_margin_db:.2f} dB; "
                      f"target {targets.phase_margin_deg:g}°, GM {targets.gain_margin_db:g} dB)")
