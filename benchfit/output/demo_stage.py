"""The demo's second scenario: a precision reference buffer into a 22 µF reservoir capacitor.

The scenario (``sample_data/refbuf_aol.csv``, truth in ``scenarios.json``): an
op-amp with an emitter-follower output stage buffers a 1 V reference to
2.5 V for an ADC, driving a 22 µF ceramic capacitor (3 mΩ ESR) through the
stage's 4 Ω open-loop output resistance.  The measured open-loop gain (with
noise) is fitted, the feedback network is chosen automatically for 60° of
phase margin at a closed-loop gain of 2.5, snapped to E96/E12, spread over
tolerances, and the crossing picture, predictions and an HTML page are
written beside the buck scenario's; the step measured on the board as it is
now (``refbuf_step_trace.csv``: only a lead capacitor, it rings) is overlaid on
the new design's predicted step.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import asdict, dataclass
from pathlib import Path
from typing import Any

from benchfit.data import read_sweep, read_trace
from benchfit.errors import InputError
from benchfit.fileio import write_json_atomic
from benchfit.fitting import fit
from benchfit.loop.loopgain import LoopPlant
from benchfit.loop.stage import design_stage
from benchfit.loop.stage_load import StageLoad
from benchfit.loop.targets import Targets
from benchfit.numfmt import eng
from benchfit.output.curves import write_curve_csv
from benchfit.output.plot_stage import stage_curve
from benchfit.output.stage_report import stage_report_html


@dataclass(frozen=True)
class StageScenario:
    """Files and design choices of the stage demo (a scenario of benchfit's own)."""

    aol_file: str = "refbuf_aol.csv"
    step_file: str = "refbuf_step_trace.csv"   # the board as it is now (overlaid when present)
    step_channel: str = "CH2"
    stage: str = "noninverting"
    closed_loop_gain: float = 2.5
    network: str = "auto"
    phase_margin_deg: float = 60.0
    gain_margin_db: float = 10.0
    r_out_ohm: float = 4.0
    c_load_f: float = 22e-6
    esr_ohm: float = 0.003
    series: tuple[str, str] = ("E96", "E12")
    draws: int = 1000
    min_yield: float = 0.95             # as the converter scenario: headroom for the part tolerances
    seed: int = 2025
    step_v: float = 0.01
    load_step_a: float = 0.01


def run_stage_demo(data_dir: str | Path, out_dir: str | Path, *, scenario: StageScenario | None = None,
                   log: Callable[[str], None] = lambda _s: None) -> dict[str, Any]:
    """Fit the Aol, design the stage, predict it and write its files into ``out_dir/stage``.

    Returns
    -------
    dict
        ``files`` (role -> path), ``summary`` (the numbers quoted) and ``scenario``.
    """
    sc = scenario or StageScenario()
    path = Path(data_dir) / sc.aol_file
    if not path.is_file():
        raise InputError(f"the demo needs {sc.aol_file} in {data_dir}; it is missing", source="--data")
    sweep = read_sweep(path)
    log(f"read {path}: {len(sweep)} points, {eng(sweep.f_min_hz, 'Hz')} to {eng(sweep.f_max_hz, 'Hz')}")
    aol_fit = fit(sweep)
    log(aol_fit.report() + "\n")
    lp = LoopPlant(aol_fit.model, name=path.stem, band_hz=(sweep.f_min_hz, sweep.f_max_hz),
                   draws=aol_fit.draw_responses)
    d = design_stage(lp, sc.network, Targets(phase_margin_deg=sc.phase_margin_deg,
                                             gain_margin_db=sc.gain_margin_db),
                     gain=sc.closed_loop_gain, stage=sc.stage,
                     load=StageLoad(sc.r_out_ohm, sc.c_load_f, sc.esr_ohm), series=sc.series,
                     draws=sc.draws, seed=sc.seed, sources=(str(path),), min_yield=sc.min_yield)
    log(d.report() + "\n")
    out = Path(out_dir) / "stage"
    out.mkdir(parents=True, exist_ok=True)
    files = {"stage_design": out / "stage_design.json", "stage_fit": out / "aol_fit.json",
             "stage_report": out / "report_stage.html"}
    d.to_json(files["stage_design"])
    aol_fit.to_json(files["stage_fit"])
    trace_path = Path(data_dir) / sc.step_file
    trace = read_trace(trace_path) if trace_path.is_file() else None
    if trace is not None:
        log(f"read {trace_path}: the present board's step, overlaid on the new design's prediction")
    page, pred = stage_report_html(
        d, title="benchfit demo: reference buffer (op-amp + emitter follower) into 22 µF, gain 2.5",
        step_v=sc.step_v, load_step_a=sc.load_step_a, step_trace=trace,
        step_channel=sc.step_channel if trace is not None else None)
    from benchfit.fileio import write_text_atomic

    write_text_atomic(files["stage_report"], page)
    for name in ("closed", "step", "zout", "load_step"):
        c = stage_curve(d, name, step_v=sc.step_v, load_step_a=sc.load_step_a)
        files[f"stage_curve_{name}"] = write_curve_csv(c, out / f"curve_{name}.csv")
    log(pred.report())
    m = d.snapped.corners[0]
    summary = {"network": d.kind, "parts": dict(d.snapped.network.parts),
               "closed_loop_gain": d.closed_loop_gain["snapped"],
               "phase_margin_deg": m.phase_margin_deg, "crossover_hz": m.crossover_hz,
               "rate_of_closure_db_per_decade": d.crossing["rate_of_closure_db_per_decade"],
               "bandwidth_hz": pred.bandwidth_hz(), "overshoot_pct": pred.step.overshoot_pct,
               "load_step_peak_v": None if pred.load is None else pred.load.peak_value,
               "yield": None if d.spread is None else d.spread.yield_fraction}
    write_json_atomic(out / "summary.json", summary)
    files["stage_summary"] = out / "summary.json"
    files["index"] = write_index(Path(out_dir), files["stage_report"], summary)
    return {"files": {k: str(v) for k, v in files.items()}, "summary": summary,
            "scenario": asdict(sc)}


def write_index(out_dir: Path, stage_report: Path, summary: dict[str, Any]) -> Path:
    """``OUT/index.html``: one page pointing at both scenarios' reports."""
    import html

    from benchfit.fileio import write_text_atomic

    rows = [("report.html", "Buck converter: Type III compensation (the first scenario)"),
            (str(stage_report.relative_to(out_dir)),
             f"Reference buffer into 22 µF: {summary['network']} feedback network, gain "
             f"{summary['closed_loop_gain']:.4g}, PM {summary['phase_margin_deg']:.1f}°, rate of "
             f"closure {summary['rate_of_closure_db_per_decade']:.0f} dB/decade")]
    items = "\n".join(f'<li><a href="{html.escape(h)}">{html.escape(t)}</a></li>' for h, t in rows)
    page = ("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\"><title>benchfit demo"
            "</title></head><body><h1>benchfit demo: two scenarios</h1><ul>\n" + items +
            "\n</ul></body></html>\n")
    return write_text_atomic(out_dir / "index.html", page)
