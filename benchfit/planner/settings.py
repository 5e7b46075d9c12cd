"""What an adaptive capture is asked (AdaptiveSettings), what it found (AdaptiveResult), and the
words it stops with."""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field
from typing import Any

from benchfit.data.response import QUANTITIES
from benchfit.errors import InputError
from benchfit.provenance import Provenance

PRECISION = "precision reached"
#: The phase margin is known and the gain margin cannot be from this capture
#: (benchfit.planner.gainmargin).
PM_ONLY = "phase margin known; gain margin not determined"
MAX_POINTS = "max points"
MAX_TIME = "max time"
NOTHING_LEFT = "no further point would reduce the uncertainty"
INTERRUPTED = "interrupted"
ROUNDS = "round limit"

#: What the data of a capture may be declared as for the adaptive capture: a loop gain, or
#: not said (then the coarse pass decides, see :func:`not_a_loop_gain`).
LOOP_QUANTITIES = ("loop", "unknown")

#: What to do, said with every refusal of a measurement that is not a loop gain.
NEEDS_LOOP_GAIN = ("adaptive capture needs a loop-gain measurement: inject into the closed loop "
                   "(T = -B/A) with a band around its crossover, or capture this without --adaptive")


@dataclass(frozen=True)
class AdaptiveSettings:
    """What an adaptive capture measures and when it stops.

    Parameters
    ----------
    start_hz, stop_hz
        The band, Hz.
    level_v
        Source level, V.
    bandwidth_hz
        Widest measurement bandwidth, Hz (points use it where the noise allows).
    min_bandwidth_hz
        Narrowest bandwidth, Hz; beyond it readings are averaged.
    pm_sigma_deg, gm_sigma_db
        Asked σ of the phase margin and the gain margin.
    max_points, max_time_s
        Budgets: points measured, instrument time in s.
    per_decade
        Points per decade of the coarse pass.
    max_repeats
        Most readings at one point.
    linearity
        Run the linearity check around the crossover.
    auto_level
        Halve a level that changes the response and continue at a linear one.
    quantity
        What is measured (file header); ``loop`` for a loop gain.
    """

    start_hz: float
    stop_hz: float
    level_v: float = 0.01
    bandwidth_hz: float = 1000.0
    min_bandwidth_hz: float = 1.0
    pm_sigma_deg: float = 0.5
    gm_sigma_db: float = 0.5
    max_points: int = 400
    max_time_s: float = math.inf
    per_decade: float = 4.0
    max_repeats: int = 32
    linearity: bool = True
    auto_level: bool = False
    quantity: str = "loop"

    def validate(self) -> None:
        """Raise :class:`InputError` naming the option that is out of range."""
        def pos(v, opt, what="a positive value"):
            if not (isinstance(v, (int, float)) and v > 0 and not math.isnan(v)):
                raise InputError(f"{v!r}: expected {what}", source=opt)
        pos(self.start_hz, "--start", "a positive frequency")
        if not (math.isfinite(self.stop_hz) and self.stop_hz > self.start_hz):
            raise InputError(f"{self.stop_hz} Hz: expected a frequency above --start", source="--stop")
        pos(self.level_v, "--level")
        pos(self.bandwidth_hz, "--bandwidth")
        pos(self.min_bandwidth_hz, "--min-bandwidth")
        if self.min_bandwidth_hz > self.bandwidth_hz:
            raise InputError(f"{self.min_bandwidth_hz} Hz is above --bandwidth ({self.bandwidth_hz} Hz)",
                             source="--min-bandwidth")
        pos(self.pm_sigma_deg, "--pm-sigma", "a positive σ in degrees")
        pos(self.gm_sigma_db, "--gm-sigma", "a positive σ in dB")
        if int(self.max_points) < 5:
            raise InputError(f"{self.max_points}: expected at least 5", source="--max-points")
        pos(self.max_time_s, "--max-time", "a positive time in s")
        pos(self.per_decade, "per_decade")
        if int(self.max_repeats) < 2:
            raise InputError(f"{self.max_repeats}: expected at least 2", source="max_repeats")
        if self.quantity not in QUANTITIES:
            raise InputError(f"{self.quantity!r}: expected one of {QUANTITIES}", source="--quantity")
        if self.quantity not in LOOP_QUANTITIES:
            raise InputError(f"{self.quantity!r}: {NEEDS_LOOP_GAIN} (--quantity loop)", source="--quantity")

    def to_dict(self) -> dict[str, Any]:
        return asdict(self)

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> AdaptiveSettings:
        kw = {k: d[k] for k in cls.__dataclass_fields__ if k in d}
        if kw.get("max_time_s") == "inf":
            kw["max_time_s"] = math.inf
        return cls(**kw)


#: The σ fields of a result and of its history entries.
_SIGMAS = ("phase_margin_sigma_deg", "gain_margin_sigma_db")


def _known_sigma(v: Any) -> float | None:
    """A σ as JSON gives it: the number when finite, else None (not known)."""
    return float(v) if isinstance(v, (int, float)) and math.isfinite(v) else None


@dataclass(frozen=True)
class AdaptiveResult:
    """What an adaptive capture found and why it stopped.

    ``points`` counts the points in the sweep file, ``points_measured`` every
    point taken (linearity checks and points superseded by a level change
    included), ``instrument_time_s`` the instrument time of all of them.
    ``gain_margin_status`` is one of benchfit.planner.gainmargin's words
    (known, more than 30 dB, beyond the band, not determined, not known yet);
    beyond the band and not determined have no value (``gain_margin_db`` and
    its σ are NaN, JSON null) and ``gain_margin_note`` says why.  A σ not
    known yet (the budget ended first) is null in JSON too; the history's
    ``why_unknown`` says why.  ``path`` is "" when fewer than two points rose
    above the noise, so no sweep file was written (a warning says so).
    """

    path: str
    log_path: str
    points: int
    points_measured: int
    readings: int
    instrument_time_s: float
    phase_margin_deg: float
    phase_margin_sigma_deg: float
    gain_margin_db: float
    gain_margin_sigma_db: float
    crossover_hz: float
    phase_crossover_hz: float
    stopped_because: str
    rounds: int
    level_v: float
    settings: dict[str, Any]
    history: tuple[dict[str, Any], ...] = ()
    gain_margin_status: str = "not known yet"
    gain_margin_note: str = ""
    linearity: dict[str, Any] | None = None
    warnings: tuple[str, ...] = ()
    provenance: Provenance = field(default_factory=lambda: Provenance(step="adaptive_capture"))

    @property
    def known(self) -> bool:
        """True when both margins reached the asked σ."""
        return self.stopped_because == PRECISION

    def to_dict(self) -> dict[str, Any]:
        """Plain data for JSON; a σ not known (infinite, NaN) is None (JSON null), in the
        history too, so a script finds either a number or null, never a string."""
        d = {k: getattr(self, k) for k in self.__dataclass_fields__}
        for k in _SIGMAS:
            d[k] = _known_sigma(d[k])
        d["history"] = [{k: (_known_sigma(v) if k in _SIGMAS else v) for k, v in h.items()}
                        for h in self.history]
        d["warnings"] = list(self.warnings)
        d["provenance"] = self.provenance.to_dict()
        d["kind"] = "adaptive_capture_result"
        return d

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> AdaptiveResult:
        from benchfit.fileio import as_float

        if not isinstance(d, dict) or d.get("kind") != "adaptive_capture_result":
            raise InputError("expected an adaptive capture result")
        kw = {k: d[k] for k in cls.__dataclass_fields__ if k in d}
        for k in ("instrument_time_s", "phase_margin_deg", "phase_margin_sigma_deg", "gain_margin_db",
                  "gain_margin_sigma_db", "crossover_hz", "phase_crossover_hz", "level_v"):
            kw[k] = as_float(kw.get(k))
        kw["history"] = tuple(dict(h) for h in kw.get("history", ()))
        kw["warnings"] = tuple(kw.get("warnings", ()))
        kw["provenance"] = Provenance.from_dict(d.get("provenance"))
        return cls(**kw)

    def to_json(self, path) -> None:
        from benchfit.fileio import write_json_atomic

        write_json_atomic(path, self.to_dict())

    @classmethod
    def from_json(cls, path) -> AdaptiveResult:
        from benchfit.fileio import malformed_as_input_error, read_json

        with malformed_as_input_error(path, "adaptive capture result"):
            return cls.from_dict(read_json(path))

    def summary(self) -> str:
        from benchfit import numfmt

        def pm(v, s, unit, fmt):
            return "n/a" if math.isnan(v) else f"{v:{fmt}} ± {s:.2g} {unit}"
        gm = (f"gain margin  {pm(self.gain_margin_db, self.gain_margin_sigma_db, 'dB', '.2f')} at "
              f"{numfmt.eng(self.phase_crossover_hz, 'Hz', 5)}" if not math.isnan(self.gain_margin_db)
              else f"gain margin  {self.gain_margin_status}" + (f": {self.gain_margin_note}"
                                                                if self.gain_margin_note else ""))
        return (f"{self.points} points ({self.points_measured} measured, {self.readings} readings) in "
                f"{numfmt.eng(self.instrument_time_s, 's', 4)} of instrument time "
                + (f"into {self.path}\n" if self.path else f"(no sweep file: see {self.log_path})\n") +
                f"phase margin {pm(self.phase_margin_deg, self.phase_margin_sigma_deg, 'deg', '.2f')} "
                f"at {numfmt.eng(self.crossover_hz, 'Hz', 5)}\n{gm}\n"
                f"stopped: {self.stopped_because}"
                + (f"\nlinearity: {self.linearity['message']}" if self.linearity else ""))
