"""The TOML design file, and loading plants from files.

A design file describes everything :func:`benchfit.loop.design.design`
needs; paths are relative to the file itself::

    [plant]
    files = ["buck_light_load.csv", "buck_full_load.json"]   # one or more corners
    # "two_loads.csv@light": one trace of a file holding several
    order = "auto"            # fit options for sweeps (fitted on the fly)
    delay = "auto"            # "auto", "none" or seconds
    band_hz = [100, 500e3]

    [sensing]
    divider = [30e3, 10e3]    # R_top, R_bottom in ohm   (or: gain = 0.25)

    [opamp]
    gbw_hz = 10e6
    dc_gain_db = 100
    second_pole_hz = 40e6     # optional

    [network]
    type = "type3"            # type1, type2, type3, pi
    method = "k-factor"       # or "crossing"
    r_in_ohm = 10e3

    [targets]
    crossover_hz = 20e3       # or "auto"
    phase_margin_deg = 55
    gain_margin_db = 10

    [parts]
    resistor_series = "E96"
    capacitor_series = "E12"
    resistor_tolerance = 0.01     # fractions; default: the series' own tolerance
    capacitor_tolerance = 0.10

    [spread]
    draws = 2000
    seed = 1
    min_yield_percent = 95    # design for more margin until this share of draws meets the targets

    [existing]                # redesign: the plant files are loop gains measured
    type = "type2"            # with this network fitted
    parts = { R1 = 10e3, R2 = 47e3, C1 = 3.3e-9, C2 = 100e-12 }

Every section and key is optional except the plant files.  A key the file
does not know is an error naming it (a misspelt key must not be silently
ignored).
"""

from __future__ import annotations

import os
import tomllib
from collections.abc import Sequence
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

import numpy as np

from benchfit.errors import InputError
from benchfit.fileio import malformed_as_input_error, read_json
from benchfit.fitting.model import PlantModel
from benchfit.loop.choices import METHODS
from benchfit.loop.design import Design, design
from benchfit.loop.loopgain import LoopPlant, plant_from_measured_loop
from benchfit.loop.networks import Network, check_kind
from benchfit.loop.opamp import OpAmp
from benchfit.loop.sensing import Sensing
from benchfit.loop.targets import Targets

#: Known sections and their keys.
SCHEMA: dict[str, tuple[str, ...]] = {
    "plant": ("files", "order", "delay", "band_hz"),
    "sensing": ("divider", "gain"),
    "opamp": ("gbw_hz", "dc_gain_db", "second_pole_hz"),
    "network": ("type", "method", "r_in_ohm"),
    "targets": ("crossover_hz", "phase_margin_deg", "gain_margin_db"),
    "parts": ("resistor_series", "capacitor_series", "resistor_tolerance", "capacitor_tolerance"),
    "spread": ("draws", "seed", "min_yield_percent"),
    "existing": ("type", "parts"),
}


@dataclass(frozen=True)
class DesignSpec:
    """Everything a design needs, as read from a design file and/or the command line.

    Attributes mirror the design file's keys (see the module text).
    """

    plant_files: tuple[str, ...] = ()
    fit_options: dict[str, Any] = field(default_factory=dict)
    sensing: Sensing = field(default_factory=Sensing.plain)
    opamp: OpAmp | None = None
    kind: str = "type2"
    method: str = "k-factor"
    r_in: float = 10e3
    targets: Targets = field(default_factory=Targets)
    series: tuple[str, str] = ("E24", "E12")
    tolerances: tuple[float | None, float | None] = (None, None)
    draws: int = 2000
    seed: int | None = None
    min_yield: float | None = None
    crossings: str | tuple[float, float] = "all"
    existing: Network | None = None
    source: str | None = None

    def with_changes(self, **changes: Any) -> DesignSpec:
        """A copy with the given fields replaced (``None`` values are ignored)."""
        return replace(self, **{k: v for k, v in changes.items() if v is not None})

    def corners(self) -> list[LoopPlant]:
        """Load every plant file (fitting sweeps on the fly)."""
        if not self.plant_files:
            raise InputError("no plant file given", source=self.source or "PLANT")
        return [load_plant(p, self.sensing, self.fit_options, existing=self.existing,
                           existing_opamp=self.opamp) for p in self.plant_files]

    def run(self) -> Design:
        """Run the design this spec describes."""
        return design(self.corners(), self.kind, self.targets, method=self.method, r_in=self.r_in,
                      opamp=self.opamp, series=self.series, tolerances=self.tolerances,
                      draws=self.draws, seed=self.seed, min_yield=self.min_yield,
                      crossings=self.crossings,
                      sources=tuple(self.plant_files) + ((self.source,) if self.source else ()))


def _inverse(m: PlantModel) -> PlantModel:
    return PlantModel(zeros=m.poles, poles=m.zeros, k=1.0 / m.k, provenance=m.provenance)


def load_plant(path: str | os.PathLike, sensing: Sensing | None = None,
               fit_options: dict[str, Any] | None = None, *, existing: Network | None = None,
               existing_opamp: OpAmp | None = None) -> LoopPlant:
    """A plant (with sensing) from a model JSON, a fit-result JSON or a sweep file.

    ``FILE@TRACE`` (when no file of that whole name exists) reads one trace
    (1-based number or part of its name) of a sweep file holding several.
    Sweeps are fitted on the fly with :func:`benchfit.fitting.fit`; a fit
    result keeps its band and parameter covariance (for the Monte Carlo).
    With ``existing``, the file is a loop gain measured with that network in
    place and the plant becomes T_meas / C_old (sensing is then inside it).
    """
    from benchfit.data import read_sweep
    from benchfit.data.response import FrequencyResponse
    from benchfit.fitting import fit
    from benchfit.fitting.result import FitResult

    name = Path(path).name
    sensing = sensing or Sensing.plain()
    trace = None
    if not Path(path).exists() and "@" in str(path):
        # FILE@TRACE picks one trace of a file holding several (e.g. two load corners)
        path, trace = str(path).rsplit("@", 1)
        trace = int(trace) if trace.isdigit() else trace
    if not Path(path).exists():
        raise InputError("file not found", source=str(path))
    obj: Any
    if str(path).lower().endswith(".json"):
        d = read_json(path)
        kind = d.get("kind")
        with malformed_as_input_error(path, "JSON file"):
            if kind == "fit_result" or ("model" in d and "parameters" in d):
                obj = FitResult.from_dict(d)
            elif kind == "frequency_response" or "freq_hz" in d:
                obj = FrequencyResponse.from_dict(d)
            elif kind == "plant_model" or "poles" in d:
                obj = PlantModel.from_dict(d)
            else:
                raise InputError(f"JSON of kind {kind!r} is not a plant; expected a model, a fit "
                                 "result or a frequency response")
    else:
        obj = read_sweep(path, trace=trace)
    said = [f"{name}: {w}" for w in (getattr(obj, "meta", None) or {}).get("warnings", [])]
    if existing is not None:
        if isinstance(obj, FitResult):
            obj = obj.model
        if isinstance(obj, PlantModel):
            rest = obj.cascade(_inverse(existing.model(existing_opamp)), step="remove_compensator")
            return LoopPlant(rest, Sensing.plain(), name=name, warnings=tuple(said))
        return LoopPlant(plant_from_measured_loop(obj, existing, existing_opamp), Sensing.plain(),
                         name=name, warnings=tuple(said))
    if isinstance(obj, FrequencyResponse):
        obj = fit(obj, **(fit_options or {}))
        said += [f"{name} fit: {w}" for w in obj.warnings]
    if isinstance(obj, FitResult):
        lo, hi = obj.stats.get("f_min_hz"), obj.stats.get("f_max_hz")
        band = (float(lo), float(hi)) if lo and hi and np.isfinite([lo, hi]).all() else None
        return LoopPlant(obj.model, sensing, name=name, band_hz=band, draws=obj.draw_responses,
                         warnings=tuple(said))
    return LoopPlant(obj, sensing, name=name, warnings=tuple(said))


# ----- TOML -------------------------------------------------------------------------------
def _num(sec: dict[str, Any], key: str, where: str, default: Any = None) -> Any:
    if key not in sec:
        return default
    v = sec[key]
    if isinstance(v, bool) or not isinstance(v, (int, float)):
        raise InputError(f"{key} = {v!r}; expected a number", source=where)
    return float(v)


def _inside(base: Path, name: str, src: str) -> str:
    """A plant path from a design file, resolved against the file's folder.

    A design file may come from someone else's disk, so it may only name files in
    its own folder or below it: absolute paths and '..' that leave the folder
    are refused (give such plants on the command line instead).
    """
    file_part = name.rsplit("@", 1)[0] if "@" in name else name  # FILE@TRACE
    if Path(file_part).is_absolute() or Path(name).is_absolute():
        raise InputError(f"plant.files: {name!r} is an absolute path; a design file may only name "
                         "files in its own folder or below (give other plants on the command line)",
                         source=src)
    if not all((base / n).resolve().is_relative_to(base) for n in (name, file_part)):
        raise InputError(f"plant.files: {name!r} points outside the design file's folder {base}; "
                         "move the file there or give it on the command line", source=src)
    return str(base / name)


def read_design_file(path: str | os.PathLike) -> DesignSpec:
    """Parse a TOML design file into a :class:`DesignSpec` (paths made absolute)."""
    p = Path(path)
    src = str(path)
    try:
        data = tomllib.loads(p.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise InputError("file not found", source=src) from None
    except IsADirectoryError:
        raise InputError("is a folder, expected a TOML design file", source=src) from None
    except UnicodeDecodeError:
        raise InputError("not UTF-8 text; expected a TOML design file", source=src) from None
    except OSError as e:
        raise InputError(f"cannot read: {e.strerror}", source=src) from None
    except tomllib.TOMLDecodeError as e:
        raise InputError(f"not valid TOML ({e})", source=src) from None
    for sec, body in data.items():
        if sec not in SCHEMA:
            raise InputError(f"unknown section [{sec}]; expected one of {', '.join(SCHEMA)}",
                             source=src)
        if not isinstance(body, dict):
            raise InputError(f"{sec} must be a [section], found a value", source=src)
        for key in body:
            if key not in SCHEMA[sec]:
                raise InputError(f"unknown key {sec}.{key}; [{sec}] takes "
                                 f"{', '.join(SCHEMA[sec])}", source=src)
    base = p.resolve().parent
    spec = DesignSpec(source=src)
    changes: dict[str, Any] = {}

    plant = data.get("plant", {})
    files = plant.get("files", [])
    if isinstance(files, str):
        files = [files]
    if not isinstance(files, list) or not all(isinstance(f, str) for f in files):
        raise InputError(f"plant.files = {files!r}; expected a list of file names", source=src)
    changes["plant_files"] = tuple(_inside(base, f, src) for f in files)
    fit_opts: dict[str, Any] = {}
    if "order" in plant:
        o = plant["order"]
        if not (o == "auto" or (isinstance(o, int) and not isinstance(o, bool) and o > 0)):
            raise InputError(f"plant.order = {o!r}; expected \"auto\" or a whole number", source=src)
        fit_opts["order"] = o
    if "delay" in plant:
        dl = plant["delay"]
        if dl not in ("auto", "none") and (isinstance(dl, bool) or not isinstance(dl, (int, float))):
            raise InputError(f"plant.delay = {dl!r}; expected \"auto\", \"none\" or seconds",
                             source=src)
        fit_opts["delay"] = dl if isinstance(dl, str) else float(dl)
    if "band_hz" in plant:
        b = plant["band_hz"]
        if not (isinstance(b, list) and len(b) == 2 and all(isinstance(x, (int, float)) for x in b)):
            raise InputError(f"plant.band_hz = {b!r}; expected [f_min, f_max] in Hz", source=src)
        fit_opts["band"] = (float(b[0]), float(b[1]))
    changes["fit_options"] = fit_opts

    sens = data.get("sensing", {})
    if "divider" in sens and "gain" in sens:
        raise InputError("give sensing.divider or sensing.gain, not both", source=src)
    if "divider" in sens:
        dv = sens["divider"]
        if not (isinstance(dv, list) and len(dv) == 2 and all(isinstance(x, (int, float)) for x in dv)):
            raise InputError(f"sensing.divider = {dv!r}; expected [R_top, R_bottom] in ohm", source=src)
        changes["sensing"] = Sensing.divider(*dv)
    elif "gain" in sens:
        changes["sensing"] = Sensing.plain(_num(sens, "gain", src))

    op = data.get("opamp", {})
    if op:
        if "gbw_hz" not in op:
            raise InputError("[opamp] needs gbw_hz", source=src)
        changes["opamp"] = OpAmp(gbw_hz=_num(op, "gbw_hz", src),
                                 dc_gain_db=_num(op, "dc_gain_db", src, 100.0),
                                 second_pole_hz=_num(op, "second_pole_hz", src))

    net = data.get("network", {})
    if "type" in net:
        changes["kind"] = check_kind(net["type"], source=f"{src}: network.type")
    if "method" in net:
        if net["method"] not in METHODS:
            raise InputError(f"network.method = {net['method']!r}; expected one of "
                             f"{', '.join(METHODS)}", source=src)
        changes["method"] = net["method"]
    if "r_in_ohm" in net:
        changes["r_in"] = _num(net, "r_in_ohm", src)

    tg = data.get("targets", {})
    if tg:
        fc = tg.get("crossover_hz")
        if fc is not None and fc != "auto" and (isinstance(fc, bool) or not isinstance(fc, (int, float))):
            raise InputError(f"targets.crossover_hz = {fc!r}; expected Hz or \"auto\"", source=src)
        changes["targets"] = Targets(
            crossover_hz=None if fc in (None, "auto") else float(fc),
            phase_margin_deg=_num(tg, "phase_margin_deg", src, spec.targets.phase_margin_deg),
            gain_margin_db=_num(tg, "gain_margin_db", src, spec.targets.gain_margin_db))

    pt = data.get("parts", {})
    if pt:
        changes["series"] = (str(pt.get("resistor_series", spec.series[0])),
                             str(pt.get("capacitor_series", spec.series[1])))
        changes["tolerances"] = (_num(pt, "resistor_tolerance", src),
                                 _num(pt, "capacitor_tolerance", src))

    sp = data.get("spread", {})
    for key in ("draws", "seed"):
        if key in sp:
            v = sp[key]
            if isinstance(v, bool) or not isinstance(v, int) or v < 0:
                raise InputError(f"spread.{key} = {v!r}; expected a whole number >= 0", source=src)
            changes[key] = v
    if "min_yield_percent" in sp:
        v = _num(sp, "min_yield_percent", src)
        if not 0.0 < v < 100.0:
            raise InputError(f"spread.min_yield_percent = {v:g}; expected a percentage between "
                             "0 and 100", source=src)
        changes["min_yield"] = v / 100.0

    ex = data.get("existing", {})
    if ex:
        if "type" not in ex or "parts" not in ex or not isinstance(ex["parts"], dict):
            raise InputError("[existing] needs type and parts = { R1 = ..., ... }", source=src)
        changes["existing"] = Network(check_kind(ex["type"], source=f"{src}: existing.type"),
                                      {k: _num(ex["parts"], k, f"{src}: existing.parts")
                                       for k in ex["parts"]})
    return replace(spec, **changes)


def merge_plant_files(spec: DesignSpec, files: Sequence[str]) -> DesignSpec:
    """Plant files given on the command line replace the design file's."""
    return replace(spec, plant_files=tuple(files)) if files else spec
