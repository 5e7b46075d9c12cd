"""The whole job on benchfit's own sample scenario, as one library call.

The scenario: a small synchronous buck converter (12 V in, 3.3 V out,
10 µH, 100 µF) whose control-to-output response was swept on the bench
(``sample_data/buck_plant.csv``, noisy), whose open-loop output impedance was
swept too (``buck_zout.csv``), and whose present compensation (an older,
weaker Type III network on the same buck, simulated by
``sample_data/generate.py``) rings on a reference step (``step_trace.csv``)
and a load step (``load_step_trace.csv``).
The job: fit the plant, design a Type III network for a 20 kHz crossover
with at least 55° phase margin and 10 dB gain margin, snap the parts, spread
them over tolerances, predict the step and output impedance, read the
present board's phase margin from its step, and write everything a reviewer
needs into one folder.
"""

from __future__ import annotations

import os
import time
from collections.abc import Callable
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Any

from benchfit.data import read_sweep, read_trace
from benchfit.errors import InputError
from benchfit.fileio import write_json_atomic
from benchfit.fitting import fit
from benchfit.loop.design import Design, design
from benchfit.loop.loopgain import LoopPlant
from benchfit.loop.networks import network_label
from benchfit.loop.opamp import OpAmp
from benchfit.loop.sensing import Sensing
from benchfit.loop.targets import Targets
from benchfit.numfmt import deg, eng, sig
from benchfit.output.assemble import assemble
from benchfit.output.curves import write_curve_csv
from benchfit.output.predicted import in_band
from benchfit.output.report import write_report
from benchfit.output.spice import write_spice
from benchfit.output.summary import design_summary, summary_lines
from benchfit.provenance import Provenance


@dataclass(frozen=True)
class DemoScenario:
    """Files and design choices of the demo (a scenario of benchfit's own)."""

    plant_file: str = "buck_plant.csv"
    zout_file: str = "buck_zout.csv"
    step_file: str = "step_trace.csv"
    step_channel: str = "CH2"
    load_file: str = "load_step_trace.csv"
    load_channel: str = "Vout AC"
    load_current_channel: str = "Iout"  # the prediction is made for the current step measured there
    network: str = "type3"
    crossover_hz: float = 20e3          # a tenth of a 200 kHz switching frequency
    phase_margin_deg: float = 55.0
    gain_margin_db: float = 10.0
    divider_ohm: tuple[float, float] = (10e3, 3.24e3)   # 0.8 V reference -> 3.27 V out (E96 parts)
    opamp_gbw_hz: float = 10e6
    r_in_ohm: float = 10e3
    series: tuple[str, str] = ("E96", "E24")
    draws: int = 2000
    min_yield: float = 0.95             # design with headroom for the part tolerances
    seed: int = 2024


@dataclass(frozen=True, eq=False)
class DemoResult:
    """What the demo produced.

    Attributes
    ----------
    out_dir
        Output folder.
    files
        Written files by role (design, fit, report, ...).
    summary
        The numbers a designer quotes (:func:`benchfit.output.summary.design_summary`).
    present_board
        Figures read from the measured step of the board as it is now.
    seconds
        Wall time of the run.
    provenance
        The scenario's files and settings.
    design
        The design object itself (not serialised: it is in ``files['design']``).
    """

    out_dir: Path
    files: dict[str, str]
    summary: dict[str, Any]
    present_board: dict[str, float]
    seconds: float
    provenance: Provenance = field(default_factory=lambda: Provenance(step="demo"))
    design: Design | None = field(repr=False, default=None)

    def to_dict(self) -> dict[str, Any]:
        return {"kind": "demo", "out_dir": str(self.out_dir), "files": dict(self.files),
                "summary": dict(self.summary), "present_board": dict(self.present_board),
                "seconds": self.seconds, "provenance": self.provenance.to_dict()}

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> DemoResult:
        if not isinstance(d, dict) or d.get("kind") != "demo":
            raise InputError("expected a demo result (kind 'demo')")
        return cls(out_dir=Path(d["out_dir"]), files=dict(d["files"]), summary=dict(d["summary"]),
                   present_board=dict(d["present_board"]), seconds=float(d["seconds"]),
                   provenance=Provenance.from_dict(d.get("provenance")))


def run_demo(data_dir: str | os.PathLike, out_dir: str | os.PathLike = "benchfit-out", *,
             scenario: DemoScenario | None = None, pdf: bool = False,
             log: Callable[[str], None] = lambda _s: None) -> DemoResult:
    """Take the sample scenario through the whole job and write the results.

    Parameters
    ----------
    data_dir
        Folder with the sample files (``sample_data/``).
    out_dir
        Folder to write into (created if missing).
    scenario
        Files and design choices (default: :class:`DemoScenario`).
    pdf
        Also write the report as PDF.
    log
        Called with each progress text (the CLI prints them).

    Returns
    -------
    DemoResult
    """
    t0 = time.perf_counter()
    sc = scenario or DemoScenario()
    data, out = Path(data_dir), Path(out_dir)
    for name in (sc.plant_file, sc.zout_file, sc.step_file, sc.load_file):
        if not (data / name).is_file():
            raise InputError(f"the demo needs {name} in {data}; it is missing", source="--data")
    rel = {n: str(data / n) for n in (sc.plant_file, sc.zout_file, sc.step_file, sc.load_file)}

    sweep = read_sweep(rel[sc.plant_file])
    log(f"read {rel[sc.plant_file]}: {len(sweep)} points, {eng(sweep.f_min_hz, 'Hz')} to {eng(sweep.f_max_hz, 'Hz')}")
    plant_fit = fit(sweep)
    log("\n" + plant_fit.report() + "\n")

    r_top, r_bot = sc.divider_ohm
    lp = LoopPlant(plant_fit.model, Sensing.divider(r_top, r_bot), name=Path(sc.plant_file).stem,
                   band_hz=(sweep.f_min_hz, sweep.f_max_hz), draws=plant_fit.draw_responses)
    targets = Targets(crossover_hz=sc.crossover_hz, phase_margin_deg=sc.phase_margin_deg,
                      gain_margin_db=sc.gain_margin_db)
    des = design(lp, sc.network, targets, r_in=sc.r_in_ohm, opamp=OpAmp(sc.opamp_gbw_hz), series=sc.series,
                 draws=sc.draws, seed=sc.seed, sources=(rel[sc.plant_file],),
                 min_yield=sc.min_yield)
    log(des.report() + "\n")

    zout = read_sweep(rel[sc.zout_file])
    zout_fit = fit(zout)
    step_trace = read_trace(rel[sc.step_file])
    load_trace = read_trace(rel[sc.load_file])
    inputs = assemble(
        des, fit=plant_fit, sweep=sweep, step_trace=step_trace, step_channel=sc.step_channel, zout=zout,
        zout_model=zout_fit.model, load_trace=load_trace, load_channel=sc.load_channel,
        load_current_channel=sc.load_current_channel,
        title=f"benchfit demo: {network_label(sc.network)} compensation of a 3.3 V buck converter",
        settings={"output impedance model": f"fit of {rel[sc.zout_file]}, order {zout_fit.stats.get('order')}"},
        notes=("The measured traces are of the board as it is now, with its present compensation; the "
               "coloured curves predict the new design. The present board's ringing is what the new "
               "network is meant to remove.",))
    step, ls = inputs.step, inputs.load_step
    # the load step rings with the closed loop's dominant poles: its ζ is the present board's
    pm_now = ls.phase_margin if ls is not None and ls.phase_margin is not None else step.phase_margin
    present = {"zeta": pm_now.zeta, "phase_margin_deg": pm_now.phase_margin_deg,
               "overshoot_pct": step.measurement.overshoot_pct,
               "load_step_deviation_v": ls.measurement.deviation_v if ls is not None else float("nan"),
               "load_step_a": ls.measurement.current_step_a if ls is not None else float("nan")}
    log(f"present board: reference step ({rel[sc.step_file]}) overshoot {sig(step.measurement.overshoot_pct)} %; "
        f"load step ({rel[sc.load_file]}) {eng(present['load_step_a'], 'A')} gives "
        f"{eng(present['load_step_deviation_v'], 'V')}, ringing ζ {sig(pm_now.zeta)}, "
        f"phase margin about {deg(pm_now.phase_margin_deg, 0)} (second-order reading)")

    out.mkdir(parents=True, exist_ok=True)
    files = {
        "design": out / "design.json", "fit": out / "plant_fit.json", "zout_fit": out / "zout_fit.json",
        "step": out / "step.json", "spice": out / "plant.cir", "report": out / "report.html",
    }
    des.to_json(files["design"])
    plant_fit.to_json(files["fit"])
    zout_fit.to_json(files["zout_fit"])
    write_json_atomic(files["step"], step.to_dict(include_curves=False))
    write_spice(plant_fit.model, files["spice"], "buck_plant")
    for key in ("loop", "closed", "step", "zout_closed", "load_step"):
        c = inputs.curve(key)
        if c is not None:
            files[f"curve_{key}"] = write_curve_csv(in_band(c, lp.band_hz), out / f"curve_{key}.csv")
    rep = write_report(inputs, files["report"], pdf_path=out / "report.pdf" if pdf else None)
    if rep["pdf"]:
        files["pdf"] = Path(rep["pdf"])
    summary = design_summary(des)
    for line in summary_lines(summary):
        log(line)
    prov = Provenance(step="demo", sources=tuple(rel.values()), settings=asdict(sc))
    return DemoResult(out_dir=out, files={k: str(v) for k, v in files.items()}, summary=summary,
                      present_board=present, seconds=time.perf_counter() - t0, provenance=prov, design=des)
