"""The adaptive capture: measure, fit, place points where the margins are decided, stop when known.

Steps (docs/capture.md, "Adaptive capture"):

1. A coarse log pass over the band (:func:`~benchfit.planner.placement.coarse_grid`).
2. Rounds: fit what was measured (:func:`benchfit.fitting.fit`), carry the
   fit's covariance to PM and GM (:func:`~benchfit.planner.uncertainty.margin_spread`),
   and, unless :func:`stop_reason` says stop, measure the points the
   placement rules ask for: both sides of every crossing, across every
   resonance, around every point the fit misses, and where a point removes
   the most margin variance per second.
3. Once a crossover is known, the linearity check (:mod:`benchfit.planner.linearity`);
   with ``auto_level`` a level that changes the response is halved and the
   sweep re-measured at the new level.

Each point's bandwidth and readings come from the measured noise
(:mod:`benchfit.planner.noise`).  Every point is in the capture log before the
next is taken, and the sweep file is rebuilt from it (:mod:`benchfit.planner.record`).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np

from benchfit.bench.capture import StopFlag  # Ctrl-C: stop after the current point
from benchfit.errors import FitError, InputError
from benchfit.planner import linearity as lin
from benchfit.planner import placement as pl
from benchfit.planner.fitstep import (  # noqa: F401 - re-exported: the rules live there
    REDCHI_OK,
    fit_adequate,
    fit_band_start,
    fit_for_margins,
    identified,
    simpler_fit,
    slow_pole_as_integrator,
)
from benchfit.planner.gainmargin import GM_PENDING, GainMarginState
from benchfit.planner.noise import NoiseMap, TimeModel, choose_point_settings, noise_dominated
from benchfit.planner.probe import Probe, Reading
from benchfit.planner.record import (
    LogRow,
    append_row,
    create_log,
    log_path,
    read_log,
    sweep_rows,
    write_sweep,
)
from benchfit.planner.rounds import POINTS_PER_ROUND, RoundPlanner  # noqa: F401 - re-exported
from benchfit.planner.settings import (  # noqa: F401 - re-exported
    INTERRUPTED,
    MAX_POINTS,
    MAX_TIME,
    NOTHING_LEFT,
    PM_ONLY,
    PRECISION,
    ROUNDS,
    AdaptiveResult,
    AdaptiveSettings,
)
from benchfit.planner.stability import stability_warnings
from benchfit.planner.stopping import (  # noqa: F401 - gm_known re-exported
    NEEDS_LOOP_GAIN,
    gm_known,
    not_a_loop_gain,
    stop_reason,
)
from benchfit.planner.uncertainty import MarginSpread, margin_spread
from benchfit.provenance import Provenance

#: Most rounds of fit-and-place (a guard; the budgets normally end the capture first).
MAX_ROUNDS = 40
#: Halvings of the level the auto-level search may make.
MAX_HALVINGS = 4


class _Budget(Exception):
    """Raised inside a round when a budget runs out before the next point."""

    def __init__(self, reason: str) -> None:
        super().__init__(reason)
        self.reason = reason


class AdaptiveCapture(RoundPlanner):
    """One adaptive capture into ``out`` (see module notes).

    Parameters
    ----------
    probe
        Point readings through an instrument session.
    settings
        What to measure and when to stop.
    out
        The sweep file; the capture log sits beside it.
    resource
        Resource name recorded in the files.
    seed
        Seed of the parameter draws (the σ estimate), for repeatable runs.
    progress
        Called as ``progress(points_measured, message)`` after each point.
    """

    def __init__(self, probe: Probe, settings: AdaptiveSettings, out: str | Path, *, resource: str = "",
                 seed: int = 0, progress: Callable[[int, str], None] | None = None) -> None:
        settings.validate()
        self.probe = probe
        self.s = settings
        self.out = Path(out)
        self.log = log_path(out)
        self.resource = resource or probe.session.name
        self.rng = np.random.default_rng(seed)
        self.progress = progress or (lambda n, msg: None)
        self.rows: list[LogRow] = []
        self.level = settings.level_v
        self.noise: NoiseMap | None = None
        self.times = TimeModel()
        self.warnings: list[str] = []
        self.history: list[dict[str, Any]] = []
        self.linearity: lin.LinearityResult | None = None
        self.last_linearity: lin.LinearityResult | None = None
        self.linearity_notes: list[str] = []
        self.halvings = 0
        self.stop_flag: StopFlag | None = None
        self.band = (settings.start_hz, settings.stop_hz)
        self.model = None
        self.integrators: int | None = None
        self.fit_from_hz: float | None = None
        self.last: tuple | None = None
        self.last_gm: GainMarginState | None = None
        self.per_decade = settings.per_decade

    # ----- bookkeeping ----------------------------------------------------------------
    @property
    def elapsed_s(self) -> float:
        return float(sum(r.time_s for r in self.rows))

    def _sweep(self) -> list[LogRow]:
        return sweep_rows(self.rows, self.level)

    def _stddev(self, rows: list[LogRow]) -> np.ndarray:
        """σ of each sweep point from the smoothed noise map (steadier than its own 3 readings)."""
        sd = np.array([r.stddev for r in rows])
        if self.noise is None:
            return sd
        pred = np.array([self.noise.scatter(r.freq_hz, r.level_v, r.bandwidth_hz) / math.sqrt(r.repeats)
                         for r in rows])
        return np.where(np.isfinite(pred) & (pred > 0), pred, sd)

    def _learn(self) -> None:
        rows = [r for r in self.rows if r.repeats >= 2]
        if rows:
            self.noise = NoiseMap.from_points([r.freq_hz for r in rows],
                                              [r.scatter * abs(r.response) for r in rows],
                                              [r.level_v for r in rows], [r.bandwidth_hz for r in rows],
                                              [r.repeats for r in rows])
            self.times = TimeModel.from_points([r.freq_hz for r in rows], [r.time_s for r in rows],
                                               [r.repeats for r in rows], [r.bandwidth_hz for r in rows])

    def _meta(self, complete: bool, stopped: str | None) -> dict[str, Any]:
        return {"instrument": self.probe.session.idn, "profile": self.probe.profile.name,
                "resource": self.resource, "adaptive": True, "settings": self.s.to_dict(),
                "level_v": self.level, "capture_log": self.log.name, "complete": complete,
                "stopped_because": stopped, "instrument_time_s": self.elapsed_s}

    def _write_sweep(self, complete: bool = False, stopped: str | None = None) -> None:
        rows = self._sweep()
        prov = Provenance(step="adaptive_capture", sources=(self.resource,),
                          settings={"profile": self.probe.profile.name, **self.s.to_dict()})
        write_sweep(self.out, rows, self._stddev(rows), quantity=self.s.quantity,
                    meta=self._meta(complete, stopped), provenance=prov)

    # ----- measuring ------------------------------------------------------------------
    def _check_budget(self) -> None:
        if self.stop_flag is not None and self.stop_flag.requested:
            raise _Budget(INTERRUPTED)
        if len(self.rows) >= self.s.max_points:
            raise _Budget(MAX_POINTS)
        if self.elapsed_s >= self.s.max_time_s:
            raise _Budget(MAX_TIME)

    def measure(self, freq_hz: float, purpose: str, sigma_required: float, *, in_sweep: bool = True,
                level_v: float | None = None) -> Reading:
        """Take one point with settings chosen for ``sigma_required`` (absolute) and record it."""
        self._check_budget()
        level = self.level if level_v is None else level_v
        ps = choose_point_settings(freq_hz, sigma_required, level, self.noise, self.s.bandwidth_hz,
                                   self.s.min_bandwidth_hz, self.s.max_repeats)
        r = self.probe.read(freq_hz, level, ps.bandwidth_hz, ps.repeats)
        sd = r.sigma if r.repeats > 1 else math.nan
        buried = noise_dominated(sd, abs(r.mean))
        row = LogRow(freq_hz=r.freq_hz, response=r.mean, stddev=sd, level_v=level,
                     bandwidth_hz=ps.bandwidth_hz, repeats=r.repeats, time_s=r.time_s,
                     scatter=r.scatter, purpose=purpose + ("-buried" if buried and in_sweep else ""),
                     in_sweep=in_sweep and not buried)
        append_row(self.log, row)
        self.rows.append(row)
        self._learn()
        if in_sweep:
            self._write_sweep()
        self.progress(len(self.rows), purpose)
        return r

    # ----- rounds ---------------------------------------------------------------------
    def _coarse(self) -> None:
        have = np.array([r.freq_hz for r in self._sweep()])
        for f in pl.coarse_grid(self.s.start_hz, self.s.stop_hz, self.per_decade):
            if have.size and np.min(np.abs(np.log10(have / f))) < pl.MIN_SPACING_DECADES:
                continue
            self.measure(float(f), "coarse", self._sigma_for(f, []))

    def _fit(self):
        """Fit the sweep so far; returns (response, fit result, |residual|/σ per point)."""
        from benchfit.data.response import FrequencyResponse

        rows = self._sweep()
        if len(rows) < 2:
            raise FitError(self._too_few(rows))
        resp = FrequencyResponse(
            freq_hz=np.array([r.freq_hz for r in rows]), response=np.array([r.response for r in rows]),
            stddev=self._stddev(rows), quantity=self.s.quantity)
        if self.fit_from_hz is not None and np.sum(resp.freq_hz >= self.fit_from_hz) >= 8:
            resp = resp.band(self.fit_from_hz, None)
        result, resid = fit_for_margins(resp, self.integrators)
        if result.integrators:
            self.integrators = result.integrators
        return resp, result, resid

    def _too_few(self, rows) -> str:
        """Why there is no sweep to fit: fewer than two points rose above the noise."""
        buried = sum(1 for r in self.rows if r.purpose.endswith("-buried"))
        return (f"only {len(rows)} point(s) in the sweep: {len(self.rows)} measured, {buried} of "
                "them buried in the noise (raise --level, lower --bandwidth, or narrow the band "
                "with --start/--stop)")

    def _linearity(self, crossover_hz: float, decisive: list[tuple[float, float]]) -> bool:
        """Run the check; True when the level changed (the sweep must be re-measured)."""
        freqs = lin.check_frequencies(crossover_hz, self.band)
        comps: list[lin.LevelComparison] = []
        ref = self.level
        for f in freqs:
            sig = self._sigma_for(f, decisive)
            base = self.measure(f, "linearity", sig, in_sweep=False, level_v=ref)
            sd_b = base.sigma
            for factor in (0.5, 2.0):
                r = self.measure(f, "linearity", sig, in_sweep=False, level_v=ref * factor)
                sd = r.sigma
                comps.append(lin.compare(f, ref, base.mean, sd_b, ref * factor, r.mean, sd))
        lo, hi = lin.linear_level_range(ref, comps)
        changed = [c for c in comps if c.changed]
        verdict = lin.level_verdict(ref, comps, auto_level=self.s.auto_level, halvings=self.halvings,
                                    max_halvings=MAX_HALVINGS)
        msg, new_level = verdict.message, verdict.level_v
        if verdict.warn:
            self.warnings.append(msg)
        if new_level != ref:
            self.halvings += 1
        self.linearity_notes.append(msg)
        self.linearity = lin.LinearityResult(linear=not changed, linear_from_v=lo, linear_to_v=hi,
                                             level_v=new_level, comparisons=tuple(comps),
                                             message=" | ".join(self.linearity_notes))
        if new_level != self.level:
            self.level = new_level
            self.linearity = None              # check again at the new level
            self.last_linearity = lin.LinearityResult(
                linear=False, linear_from_v=lo, linear_to_v=hi, level_v=new_level,
                comparisons=tuple(comps), message=" | ".join(self.linearity_notes))
            return True
        return False

    def run(self, *, resume: bool = False) -> AdaptiveResult:
        """Capture until the margins are known or a budget ends it; returns the result."""
        self.probe.session.identify()
        if resume:
            if not self.log.exists():
                raise InputError("no capture log beside it; nothing to resume (remove the file to "
                                 "start again)", source=str(self.out))
            self.rows = read_log(self.log, self.s.to_dict(), repair=True)
            if self.rows:
                self.level = [r for r in self.rows if r.in_sweep][-1].level_v if any(
                    r.in_sweep for r in self.rows) else self.s.level_v
            if any(r.purpose == "linearity" for r in self.rows):
                self.linearity = lin.LinearityResult(True, math.nan, math.nan, self.level,
                                                     message="checked before the resume (see the log)")
            self._learn()
        else:
            if self.out.exists():
                raise InputError("output file exists; pass --resume to continue that capture or "
                                 "choose another file", source=str(self.out))
            create_log(self.log, self.s.to_dict())
        self.probe.configure()
        n_coarse = len(pl.coarse_grid(self.s.start_hz, self.s.stop_hz, self.per_decade))
        if self.s.max_points < n_coarse:
            self.warnings.append(f"--max-points {self.s.max_points} is below the {n_coarse} points of "
                                 "the coarse pass over the band: the capture stops inside it, before "
                                 "the planner places any point")
        stopped = None
        spread = None
        result = None
        rounds = 0
        with StopFlag() as flag:
            self.stop_flag = flag
            try:
                stopped = self._loop()
            except _Budget as b:
                stopped = b.reason
            except KeyboardInterrupt:
                stopped = INTERRUPTED
            self.stop_flag = None
        rounds = len(self.history)
        gm = None
        if self.last is not None and self.last[4] == len(self._sweep()):
            resp, result, resid, spread, _ = self.last      # nothing measured since: keep it
            gm = self.last_gm
        else:
            try:
                resp, result, resid = self._fit()
                spread = margin_spread(result, *self._fit_band(resp), rng=self.rng, data=resp)
                gm = self.plan_round(resp, result, spread, resid).gm
            except (FitError, InputError) as e:
                if len(self._sweep()) >= 2:  # else the no-sweep warning below says why
                    self.warnings.append(f"the final fit failed: {e}")
        if spread is not None and stopped in (PRECISION, PM_ONLY) and not fit_adequate(result, resid):
            stopped = NOTHING_LEFT
        self._write_sweep(complete=stopped != INTERRUPTED, stopped=stopped)
        if len(self._sweep()) < 2:
            self.warnings.append(f"no sweep file written ({self._too_few(self._sweep())}); every "
                                 f"reading is in {self.log.name}")
        return self._result(spread, stopped, rounds, gm)

    def _refuse_unless_loop_gain(self) -> None:
        """Raise InputError when the coarse pass shows no gain crossing (:func:`not_a_loop_gain`)."""
        rows = self._sweep()
        why = not_a_loop_gain([r.freq_hz for r in rows], [r.response for r in rows])
        if why:
            raise InputError(f"{why}; {NEEDS_LOOP_GAIN} (the coarse pass is saved in {self.out.name})",
                             source="--adaptive")

    def _fit_band(self, resp) -> tuple[float, float]:
        return float(resp.freq_hz[0]), float(resp.freq_hz[-1])

    def _loop(self) -> str:
        while True:
            self._coarse()
            self._refuse_unless_loop_gain()
            for _ in range(MAX_ROUNDS):
                try:
                    resp, result, resid = self._fit()
                except FitError as e:
                    self.warnings.append(f"fit of the points so far failed ({e}); adding points")
                    self.per_decade *= 2
                    break
                spread = margin_spread(result, *self._fit_band(resp), rng=self.rng, data=resp)
                self.model = result.model
                self.last = (resp, result, resid, spread, len(self._sweep()))
                decisive = self._decisive(spread, result)
                self.fit_from_hz = fit_band_start([f for f, _ in decisive], self.s.start_hz)
                fc = spread.margins.crossover_hz
                if self.s.linearity and self.linearity is None and math.isfinite(fc):
                    if self._linearity(fc, decisive):
                        break                      # new level: measure the sweep again
                plan = self.plan_round(resp, result, spread, resid)
                self.last_gm = plan.gm
                adequate = fit_adequate(result, resid)
                self.history.append(self._round_record(resp, result, resid, spread, plan.gm, adequate))
                reason = stop_reason(spread.pm_sigma_deg, plan.gm, adequate, self.s, len(self.rows),
                                     self.elapsed_s, plan.pending)
                if reason:
                    return reason
                if not plan.points:
                    return NOTHING_LEFT
                for f, why in plan.points:
                    self.measure(f, why, self._sigma_for(f, plan.decisive))
            else:
                return ROUNDS

    def _result(self, spread: MarginSpread | None, stopped: str, rounds: int,
                gm: GainMarginState | None) -> AdaptiveResult:
        nan = math.nan
        m = spread.margins if spread is not None else None
        sweep = self._sweep()
        if stopped == NOTHING_LEFT:
            self.warnings.append("stopped before the margins reached the asked σ: no point the rules "
                                 "could place would reduce it further (see the history)")
        if gm is not None and not gm.has_value:
            self.warnings.append(f"gain margin {gm.status}: {gm.reason}")
        if m is not None:
            self.warnings.extend(stability_warnings(m))
        return AdaptiveResult(
            path=str(self.out) if len(sweep) >= 2 else "", log_path=str(self.log), points=len(sweep), points_measured=len(self.rows),
            readings=int(sum(r.repeats for r in self.rows)), instrument_time_s=self.elapsed_s,
            phase_margin_deg=m.phase_margin_deg if m else nan,
            phase_margin_sigma_deg=spread.pm_sigma_deg if spread else nan,
            gain_margin_db=m.gain_margin_db if m and gm and gm.has_value else nan,
            gain_margin_sigma_db=gm.sigma_db if gm and gm.has_value else nan,
            gain_margin_status=gm.status if gm else GM_PENDING,
            gain_margin_note=gm.reason if gm else "",
            crossover_hz=m.crossover_hz if m else nan, phase_crossover_hz=m.phase_crossover_hz if m else nan,
            stopped_because=stopped, rounds=rounds, level_v=self.level, settings=self.s.to_dict(),
            history=tuple(self.history),
            linearity=(self.linearity or self.last_linearity).to_dict()
            if (self.linearity or self.last_linearity) else None,
            warnings=tuple(dict.fromkeys(self.warnings)),
            provenance=Provenance(step="adaptive_capture", sources=(self.resource,),
                                  settings={"profile": self.probe.profile.name, "out": str(self.out),
                                            **self.s.to_dict()}))


def run_adaptive(probe: Probe, settings: AdaptiveSettings, out: str | Path, *, resume: bool = False,
                 resource: str = "", seed: int = 0,
                 progress: Callable[[int, str], None] | None = None) -> AdaptiveResult:
    """Run an adaptive capture (see :class:`AdaptiveCapture`)."""
    return AdaptiveCapture(probe, settings, out, resource=resource, seed=seed,
                           progress=progress).run(resume=resume)
