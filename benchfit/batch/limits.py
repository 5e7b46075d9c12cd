"""Limits a production unit must meet, read from a TOML file, and the judging of one row.

A limits file (every table and key optional)::

    [margins]
    min_phase_margin_deg = 45        # deg
    min_gain_margin_db = 6           # dB
    crossover_hz = [20e3, 60e3]      # window, Hz (either end may be a min/max table)
    min_modulus_margin = 0.4         # 1 / peak sensitivity
    min_delay_margin_s = 2e-6        # s
    require_stable = true            # closed loop must be stable

    [fit]
    max_rms_db = 1.5                 # worst acceptable fit residual, dB rms
    max_rms_deg = 10                 # deg rms

    [parameters]                     # windows on fitted parameters, by name
    f_esr_hz = [15e3, 80e3]
    k = { min = 0.5 }

The phase-margin minimum is judged at every gain crossing and the gain-margin
minimum at every phase crossing a row lists (its ``crossings`` cell), with the
pass rules the design uses (:mod:`benchfit.loop.passrules`); the reason names
the crossing that fails.  A row without that cell (an older table) is judged
on its main-crossover figures only.

Unknown tables or keys raise :class:`~benchfit.errors.InputError` naming the key
(and its line), so a misspelt limit never passes silently.
"""

from __future__ import annotations

import json
import math
import os
import re
import tomllib
from dataclasses import dataclass, field
from typing import Any

from benchfit.errors import InputError
from benchfit.fileio import read_text
from benchfit.loop.passrules import meets_gain_margin, meets_phase_margin
from benchfit.provenance import Provenance

#: margins-table key -> (row column, sense, plain name for the reason text)
_MARGIN_MIN = {
    "min_phase_margin_deg": ("phase_margin_deg", "phase margin", "deg"),
    "min_gain_margin_db": ("gain_margin_db", "gain margin", "dB"),
    "min_modulus_margin": ("modulus_margin", "modulus margin", ""),
    "min_delay_margin_s": ("delay_margin_s", "delay margin", "s"),
}
_FIT_MAX = {
    "max_rms_db": ("fit_rms_db", "fit residual", "dB rms"),
    "max_rms_deg": ("fit_rms_deg", "fit phase residual", "deg rms"),
}
_TABLES = ("margins", "fit", "parameters")


@dataclass(frozen=True)
class Window:
    """A closed interval ``lo <= x <= hi`` (either end may be None for open)."""

    lo: float | None = None
    hi: float | None = None

    def check(self, value: float) -> str | None:
        """None when ``value`` lies inside, else why not (a short phrase)."""
        if value is None or math.isnan(value):
            return "not available"
        if self.lo is not None and value < self.lo:
            return f"{value:.4g} < {self.lo:.4g}"
        if self.hi is not None and value > self.hi:
            return f"{value:.4g} > {self.hi:.4g}"
        return None

    def to_list(self) -> list[float | None]:
        return [self.lo, self.hi]


@dataclass(frozen=True)
class Limits:
    """What a unit must meet; every field None/empty means "not checked".

    Parameters
    ----------
    min_phase_margin_deg, min_gain_margin_db, min_modulus_margin, min_delay_margin_s
        Lower bounds on the loop margins (deg, dB, dimensionless, s).
    crossover_hz
        Window on the gain-crossover frequency, Hz.
    require_stable
        The closed loop must be stable.
    max_rms_db, max_rms_deg
        Upper bounds on the fit residual (only rows that were fitted).
    parameters
        Windows on fitted parameters, by the fit's parameter name.
    provenance
        The file the limits came from.
    """

    min_phase_margin_deg: float | None = None
    min_gain_margin_db: float | None = None
    min_modulus_margin: float | None = None
    min_delay_margin_s: float | None = None
    crossover_hz: Window | None = None
    require_stable: bool = False
    max_rms_db: float | None = None
    max_rms_deg: float | None = None
    parameters: dict[str, Window] = field(default_factory=dict)
    provenance: Provenance = field(default_factory=lambda: Provenance(step="limits"))

    @property
    def empty(self) -> bool:
        """True when nothing is checked."""
        d = self.to_dict()
        d.pop("provenance")
        return not any(v for v in d.values())

    @property
    def needs_margins(self) -> bool:
        return any(getattr(self, k) is not None for k in _MARGIN_MIN) or bool(
            self.crossover_hz) or self.require_stable

    def to_dict(self) -> dict[str, Any]:
        return {
            "min_phase_margin_deg": self.min_phase_margin_deg,
            "min_gain_margin_db": self.min_gain_margin_db,
            "min_modulus_margin": self.min_modulus_margin,
            "min_delay_margin_s": self.min_delay_margin_s,
            "crossover_hz": self.crossover_hz.to_list() if self.crossover_hz else None,
            "require_stable": self.require_stable,
            "max_rms_db": self.max_rms_db,
            "max_rms_deg": self.max_rms_deg,
            "parameters": {k: w.to_list() for k, w in self.parameters.items()},
            "provenance": self.provenance.to_dict(),
        }

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> Limits:
        xo = d.get("crossover_hz")
        return cls(
            min_phase_margin_deg=d.get("min_phase_margin_deg"),
            min_gain_margin_db=d.get("min_gain_margin_db"),
            min_modulus_margin=d.get("min_modulus_margin"),
            min_delay_margin_s=d.get("min_delay_margin_s"),
            crossover_hz=Window(*xo) if xo else None,
            require_stable=bool(d.get("require_stable", False)),
            max_rms_db=d.get("max_rms_db"),
            max_rms_deg=d.get("max_rms_deg"),
            parameters={k: Window(*v) for k, v in (d.get("parameters") or {}).items()},
            provenance=Provenance.from_dict(d.get("provenance")),
        )


# ----- reading --------------------------------------------------------------------------------
def _line_of(text: str, key: str) -> int | None:
    """1-based line where ``key`` is assigned or opened as a table (for error messages)."""
    pat = re.compile(rf"^\s*(\[\s*{re.escape(key)}\s*\]|\"?{re.escape(key)}\"?\s*=)")
    for i, line in enumerate(text.splitlines(), start=1):
        if pat.match(line):
            return i
    return None


def _number(value: Any, key: str, src: str, text: str) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise InputError(f"{key} = {value!r}; expected a finite number", source=src,
                         line=_line_of(text, key.rpartition(".")[2]))
    return float(value)


def _window(value: Any, key: str, src: str, text: str) -> Window:
    line = _line_of(text, key.rpartition(".")[2])
    if isinstance(value, list):
        if len(value) != 2:
            raise InputError(f"{key} has {len(value)} values; expected [min, max]", source=src, line=line)
        lo, hi = (None if v in ("", None) else _number(v, key, src, text) for v in value)
    elif isinstance(value, dict):
        extra = set(value) - {"min", "max"}
        if extra:
            raise InputError(f"unknown key {key}.{sorted(extra)[0]}; expected min and/or max",
                             source=src, line=line)
        lo = _number(value["min"], key, src, text) if "min" in value else None
        hi = _number(value["max"], key, src, text) if "max" in value else None
    else:
        raise InputError(f"{key} = {value!r}; expected [min, max] or {{ min = .., max = .. }}",
                         source=src, line=line)
    if lo is None and hi is None:
        raise InputError(f"{key} has neither min nor max", source=src, line=line)
    if lo is not None and hi is not None and lo > hi:
        raise InputError(f"{key}: min {lo:g} is above max {hi:g}", source=src, line=line)
    return Window(lo, hi)


def parse_limits(text: str, source: str = "<limits>") -> Limits:
    """Parse the TOML text of a limits file (see the module docstring for the keys).

    Raises
    ------
    InputError
        Invalid TOML, an unknown table or key, or a value of the wrong kind; the
        message names the key and its line.
    """
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as e:
        m = re.search(r"line (\d+)", str(e))
        raise InputError(f"not valid TOML ({e})", source=source,
                         line=int(m.group(1)) if m else None) from None
    for table in doc:
        if table not in _TABLES:
            raise InputError(f"unknown table or key {table!r}; expected tables {', '.join(_TABLES)}",
                             source=source, line=_line_of(text, table))
        if not isinstance(doc[table], dict):
            raise InputError(f"{table!r} must be a table [{table}]", source=source,
                             line=_line_of(text, table))
    kw: dict[str, Any] = {}
    for key, value in doc.get("margins", {}).items():
        if key in _MARGIN_MIN:
            kw[key] = _number(value, f"margins.{key}", source, text)
        elif key == "crossover_hz":
            kw[key] = _window(value, "margins.crossover_hz", source, text)
        elif key == "require_stable":
            if not isinstance(value, bool):
                raise InputError(f"margins.require_stable = {value!r}; expected true or false",
                                 source=source, line=_line_of(text, key))
            kw[key] = value
        else:
            known = ", ".join([*_MARGIN_MIN, "crossover_hz", "require_stable"])
            raise InputError(f"unknown key margins.{key}; expected one of {known}",
                             source=source, line=_line_of(text, key))
    for key, value in doc.get("fit", {}).items():
        if key not in _FIT_MAX:
            raise InputError(f"unknown key fit.{key}; expected one of {', '.join(_FIT_MAX)}",
                             source=source, line=_line_of(text, key))
        kw[key] = _number(value, f"fit.{key}", source, text)
    params = {name: _window(v, f"parameters.{name}", source, text)
              for name, v in doc.get("parameters", {}).items()}
    return Limits(**kw, parameters=params,
                  provenance=Provenance(step="limits", sources=(source,)))


def read_limits(path: str | os.PathLike) -> Limits:
    """Read a limits TOML file; problems raise :class:`InputError` naming file, line and key."""
    text = read_text(path, expected="a limits TOML file")
    return parse_limits(text, source=str(path))


# ----- judging --------------------------------------------------------------------------------
def _as_float(v: Any) -> float | None:
    if v is None or v == "":
        return None
    try:
        return float(v)
    except (TypeError, ValueError):
        return None


def _crossings_of(row: dict[str, Any]) -> list[tuple[str, float, float, bool]]:
    """The (kind, freq_hz, margin, main) crossings of a row's ``crossings`` cell ([] if none)."""
    cell = row.get("crossings")
    if cell in (None, ""):
        return []
    items = json.loads(cell) if isinstance(cell, str) else cell
    out = []
    for kind, f, v, main in items:
        v = math.nan if v is None else float(v)  # JSON null is NaN, "inf"/"-inf" are infinities
        out.append((str(kind), float(f), v, bool(main)))
    return out


def crossing_reasons(row: dict[str, Any], limits: Limits) -> list[str]:
    """Why the crossings other than the main pair miss the margin minimums (one reason each).

    Evidence weighed: every gain crossing of the row except the main
    crossover (judged by :func:`judge` on ``phase_margin_deg``) against the
    phase-margin minimum with :func:`~benchfit.loop.passrules.meets_phase_margin`,
    and every phase crossing except the one giving ``gain_margin_db`` (at
    ``phase_crossover_hz``) against the gain-margin minimum with
    :func:`~benchfit.loop.passrules.meets_gain_margin`: the rules the design
    and its yield use, so a second crossing at a resonance fails a unit
    exactly as it fails a design.  Each reason names the crossing's frequency
    and its place among the crossings of its kind (1 = lowest frequency).
    """
    found = _crossings_of(row)
    reasons: list[str] = []
    checks = (("gain", limits.min_phase_margin_deg, meets_phase_margin, "phase margin", "deg",
               "gain crossing"),
              ("phase", limits.min_gain_margin_db, meets_gain_margin, "gain margin", "dB",
               "phase crossing"))
    main_phase = _as_float(row.get("phase_crossover_hz"))
    main_gm = _as_float(row.get("gain_margin_db"))
    for kind, lim, rule, name, unit, what in checks:
        if lim is None:
            continue
        mine = sorted((c for c in found if c[0] == kind), key=lambda c: c[1])
        for i, (_, f, v, main) in enumerate(mine, start=1):
            if kind == "gain" and main:
                continue            # the main crossover: judged on phase_margin_deg
            if kind == "phase" and main_phase is not None and main_gm is not None and \
                    math.isclose(f, main_phase, rel_tol=1e-12) and math.isclose(v, main_gm, rel_tol=1e-12):
                continue            # the phase crossing behind gain_margin_db: judged on it
            if not bool(rule(v, lim)):
                reasons.append(f"{name} {v:.4g} {unit} < {lim:.4g} at the {what} at {f:.4g} Hz "
                               f"({i} of {len(mine)})")
    return reasons


def judge(row: dict[str, Any], limits: Limits) -> tuple[str, list[str]]:
    """Judge one result row against ``limits``.

    Parameters
    ----------
    row
        A result row (see :mod:`benchfit.batch.table`): margin figures, every
        crossing (:func:`crossing_reasons`), fit figures and ``param:<name>`` values.  A missing figure that a limit
        needs fails that limit ("not available").
    limits
        What to check.

    Returns
    -------
    status, reasons
        ``"pass"`` or ``"fail"``, and one short reason per failed limit.  With
        empty limits the status is ``"measured"`` (nothing was judged).
    """
    if limits.empty:
        return "measured", []
    reasons: list[str] = []
    for key, (col, name, unit) in _MARGIN_MIN.items():
        lim = getattr(limits, key)
        if lim is None:
            continue
        v = _as_float(row.get(col))
        if v is None or math.isnan(v):
            reasons.append(f"{name} not available")
        elif v < lim:
            reasons.append(f"{name} {v:.4g} {unit} < {lim:.4g}".replace("  ", " "))
    reasons += crossing_reasons(row, limits)
    if limits.crossover_hz is not None:
        why = limits.crossover_hz.check(_as_float(row.get("crossover_hz")))
        if why:
            reasons.append(f"crossover {why} Hz" if why != "not available" else "crossover not available")
    if limits.require_stable:
        st = row.get("closed_loop_stable")
        if st in (None, ""):
            reasons.append("closed-loop stability not available")
        elif str(st).lower() not in ("true", "1"):
            reasons.append("closed loop unstable")
    fitted = row.get("fit_order") not in (None, "")
    for key, (col, name, unit) in _FIT_MAX.items():
        lim = getattr(limits, key)
        v = _as_float(row.get(col))
        if lim is not None and fitted and v is not None and v > lim:
            reasons.append(f"{name} {v:.3g} {unit} > {lim:.3g}")
    for pname, win in limits.parameters.items():
        why = win.check(_as_float(row.get(f"param:{pname}")))
        if why:
            reasons.append(f"{pname} {why}")
    return ("fail" if reasons else "pass"), reasons
