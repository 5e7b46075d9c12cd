"""The one task every execution path runs: one sweep file in, one result row out.

The serial loop, the process pool and Dask all call :func:`run_task` with the
same :class:`TaskSettings`, so they give identical rows.  A file that cannot
be read, fitted or judged becomes a row with ``status="error"`` and the error
text; the task never raises for a bad file, so one bad file never stops a lot.

What is computed depends on what the sweep measures:

* a loop gain (``quantity == "loop"``): margins straight from the data; the
  sweep is fitted as well only when fitted parameters are asked for;
* anything else (a plant): the sweep is fitted; with a design, the loop
  T = plant_fit · compensator · sensing is formed from the design's snapped
  compensator and its sensing gain, and margins are taken from that model.
"""

from __future__ import annotations

import math
import os
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from benchfit.batch.limits import Limits, judge
from benchfit.batch.table import PARAM_PREFIX
from benchfit.data import read_sweep
from benchfit.errors import BenchfitError, InputError
from benchfit.fileio import decode_complex, read_json, to_json_text
from benchfit.fitting import fit
from benchfit.fitting.model import PlantModel
from benchfit.loop.margins import margins_from_data, margins_of_model
from benchfit.provenance import Provenance

#: Header metadata keys that name a unit (first found wins, case-insensitive).
UNIT_KEYS = ("unit", "unit_id", "serial", "serial_number", "sn", "dut")


@dataclass(frozen=True)
class DesignLoop:
    """The parts of a design a lot needs: the snapped compensator and the sensing gain.

    Parameters
    ----------
    compensator
        The snapped compensator as a model (zeros/poles in rad/s), signed so
        that T = plant · sensing · compensator is the return ratio.
    sensing_gain
        Gain of the sensing path (divider ratio times any sensor gain), V/V.
    source
        The design file.
    """

    compensator: PlantModel
    sensing_gain: float
    source: str = ""

    def loop(self, plant: PlantModel) -> PlantModel:
        """The loop gain T of one unit whose plant was fitted as ``plant``."""
        sensing = PlantModel(zeros=[], poles=[], k=self.sensing_gain,
                             provenance=Provenance(step="sensing", sources=(self.source,)))
        return plant.cascade(self.compensator, step="loop").cascade(sensing, step="loop")


def _sensing_gain(sensing: Any, src: str) -> float:
    # The design writes sensing as {"gain", "r_top", "r_bottom"}; a bare number is taken too.
    if isinstance(sensing, (int, float)) and not isinstance(sensing, bool):
        return float(sensing)
    if isinstance(sensing, dict):
        v = sensing.get("gain")
        if isinstance(v, (int, float)) and not isinstance(v, bool):
            return float(v)
        top, bottom = sensing.get("r_top"), sensing.get("r_bottom")
        if isinstance(top, (int, float)) and isinstance(bottom, (int, float)) and top + bottom > 0:
            return float(bottom) / float(top + bottom)
    raise InputError(f"'sensing' is {sensing!r}; expected a gain or an object with 'gain' "
                     "or 'r_top' and 'r_bottom'",
                     source=src)


def design_loop_from_dict(d: dict[str, Any], source: str = "<design>") -> DesignLoop:
    """Read the snapped compensator and sensing gain from a design's JSON (plain data)."""
    comp = d.get("compensator")
    if not isinstance(comp, dict):
        raise InputError("no 'compensator' object; expected a benchfit design file", source=source)
    zpk = comp.get("snapped") or comp.get("ideal")
    if not isinstance(zpk, dict) or not all(k in zpk for k in ("zeros", "poles", "k")):
        raise InputError("'compensator.snapped' is not a zeros/poles/k object", source=source)
    try:
        model = PlantModel(zeros=decode_complex(zpk["zeros"], what="compensator zeros"),
                           poles=decode_complex(zpk["poles"], what="compensator poles"),
                           k=float(zpk["k"]), delay_s=float(zpk.get("delay_s", 0.0) or 0.0),
                           provenance=Provenance(step="design", sources=(source,)))
    except (InputError, TypeError, ValueError) as e:
        raise InputError(f"compensator: {e}", source=source) from None
    gain = _sensing_gain(d.get("sensing", 1.0), source)
    if not math.isfinite(gain) or gain == 0:
        raise InputError(f"sensing gain {gain}; expected a finite non-zero value", source=source)
    return DesignLoop(compensator=model, sensing_gain=gain, source=source)


def read_design_loop(path: str | os.PathLike) -> DesignLoop:
    """Read ``design.json`` (written by the design step) for a lot."""
    d = read_json(path)
    return design_loop_from_dict(d, source=str(path))


@dataclass(frozen=True)
class TaskSettings:
    """Everything :func:`run_task` needs besides the file; plain and picklable.

    Parameters
    ----------
    order, delay, band, weighting
        Passed to :func:`benchfit.fitting.fit`.
    quantity
        Force what every sweep measures (``"plant"`` or ``"loop"``); None
        uses each file's own header.
    design
        The design's loop parts, for plant sweeps; None for none.
    limits
        What each unit must meet.
    params
        Fitted parameters to report in their own ``param:<name>`` columns
        (the limits' parameter names are added automatically).
    """

    order: str | int = "auto"
    delay: str | float = "auto"
    band: tuple[float | None, float | None] | None = None
    weighting: str = "relative"
    quantity: str | None = None
    design: DesignLoop | None = None
    limits: Limits = field(default_factory=Limits)
    params: tuple[str, ...] = ()

    @property
    def param_names(self) -> tuple[str, ...]:
        """Every parameter that gets its own column, in order, no repeats."""
        return tuple(dict.fromkeys([*self.params, *self.limits.parameters]))

    def describe(self) -> dict[str, Any]:
        """JSON-compatible settings, for provenance."""
        return {
            "order": self.order, "delay": self.delay,
            "band": list(self.band) if self.band else None, "weighting": self.weighting,
            "quantity": self.quantity,
            "design": self.design.source if self.design else None,
            "limits": self.limits.to_dict(), "params": list(self.param_names),
        }


def unit_id(path: str | os.PathLike, meta: dict[str, Any] | None = None) -> str:
    """A unit's identity: a unit/serial key of the header, else the file name without suffix."""
    for key, value in (meta or {}).items():
        if str(key).lower() in UNIT_KEYS and str(value).strip():
            return str(value).strip()
    return Path(path).stem


def _one_line(text: str) -> str:
    return re.sub(r"\s+", " ", str(text)).strip()


def _margin_cells(m) -> dict[str, Any]:
    def num(v):
        return None if v is None else float(v)

    return {
        "phase_margin_deg": num(m.phase_margin_deg),
        "crossover_hz": num(m.crossover_hz),
        "gain_margin_db": num(m.gain_margin_db),
        "phase_crossover_hz": num(m.phase_crossover_hz),
        "delay_margin_s": num(m.delay_margin_s),
        "modulus_margin": num(m.modulus_margin),
        "modulus_freq_hz": num(m.modulus_freq_hz),
        "gain_crossings": sum(1 for c in (m.crossings or ()) if c.get("kind") == "gain"),
        # every crossing, so the limits judge each one (benchfit.batch.limits.crossing_reasons)
        "crossings": to_json_text([[c["kind"], float(c["freq_hz"]), float(c["value"]),
                                    bool(c.get("main", False))] for c in (m.crossings or ())],
                                  indent=None),
        "closed_loop_stable": None if m.closed_loop_stable is None else bool(m.closed_loop_stable),
    }


def _fit_cells(fr, param_names: tuple[str, ...]) -> dict[str, Any]:
    st = fr.stats

    def num(key):
        v = st.get(key)
        return None if v is None else float(v)

    params = {p.name: [float(p.value), None if p.stderr is None else float(p.stderr), p.unit]
              for p in fr.parameters}
    cells = {
        "fit_order": int(st["order"]) if st.get("order") is not None else fr.model.order,
        "fit_delay_s": float(fr.model.delay_s),
        "fit_rms_db": num("rms_db"),
        "fit_rms_deg": num("rms_deg"),
        "fit_max_db": num("max_db"),
        "fit_reduced_chi2": num("reduced_chi2"),
        "fit_converged": None if st.get("converged") is None else bool(st["converged"]),
        "parameters": to_json_text(params, indent=None),
    }
    for name in param_names:
        cells[PARAM_PREFIX + name] = params[name][0] if name in params else None
    return cells


def _fit(resp, s: TaskSettings, *, loop: bool = False):
    # A loop gain usually holds the compensator's integrator: let the fit find it.
    extra = {"integrators": "auto"} if loop else {}
    return fit(resp, order=s.order, delay=s.delay, band=s.band, weighting=s.weighting, **extra)


def _measure(path: str, s: TaskSettings, row: dict[str, Any], warnings: list[str]) -> None:
    resp = read_sweep(path)
    quantity = s.quantity or resp.quantity
    row.update(unit=unit_id(path, resp.meta), quantity=quantity, points=len(resp),
               f_min_hz=resp.f_min_hz, f_max_hz=resp.f_max_hz)
    if quantity == "loop":
        m = margins_from_data(resp.freq_hz, resp.response)
        row.update(_margin_cells(m), margins_from="data")
        warnings.extend(m.warnings)
        if s.param_names:
            fr = _fit(resp, s, loop=True)
            row.update(_fit_cells(fr, s.param_names))
            warnings.extend(fr.warnings)
        return
    fr = _fit(resp, s)
    row.update(_fit_cells(fr, s.param_names))
    warnings.extend(fr.warnings)
    if s.design is None:
        return
    if quantity not in ("plant", "unknown"):
        warnings.append(f"a {quantity} sweep is not a plant; no loop formed with the design")
        return
    t = s.design.loop(fr.model)
    # The band, integrators, right-half-plane poles and fine-sampling hints all come
    # from the loop model's own poles and zeros (the margins module's rules).
    m = margins_of_model(t)
    row.update(_margin_cells(m), margins_from="model")
    warnings.extend(m.warnings)
    xo = m.crossover_hz
    if xo is not None and math.isfinite(xo) and not resp.f_min_hz <= xo <= resp.f_max_hz:
        warnings.append(f"crossover {xo:.4g} Hz lies outside the measured band "
                        f"{resp.f_min_hz:.4g}..{resp.f_max_hz:.4g} Hz: the fit is extrapolated there")


def run_task(path: str | os.PathLike, settings: TaskSettings) -> dict[str, Any]:
    """Read, fit and judge one sweep file.

    Parameters
    ----------
    path
        The sweep file (any dialect :func:`benchfit.data.read_sweep` reads).
    settings
        Fit options, design, limits and reported parameters.

    Returns
    -------
    dict
        One result row keyed by the columns of :func:`benchfit.batch.table.columns`.
        Never raises for a bad file: the row then has ``status="error"`` and
        ``error`` holds the reason.
    """
    path = str(path)
    row: dict[str, Any] = {"file": path, "unit": unit_id(path)}
    warnings: list[str] = []
    try:
        # Floating-point overflow inside a poor fit is reported through the fit's own
        # warnings and figures; numpy's messages would only scramble the progress line.
        with np.errstate(all="ignore"):
            _measure(path, settings, row, warnings)
        status, reasons = judge(row, settings.limits)
        row.update(status=status, reason="; ".join(reasons))
    except BenchfitError as e:
        text = _one_line(str(e))  # the row names the file already
        row.update(status="error", error=text.removeprefix(f"{path}: "))
    except Exception as e:  # noqa: BLE001 - a lot must survive any one file
        row.update(status="error", error=_one_line(f"internal error ({type(e).__name__}: {e})"))
    row["warnings"] = "; ".join(_one_line(w) for w in dict.fromkeys(warnings))
    return row
