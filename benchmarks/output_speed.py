"""How long the demo and the report take, stage by stage, and how big the report is.

Runs :func:`benchfit.output.demo.run_demo` on ``sample_data/`` into a
temporary folder (the whole job: read, fit, design, spread, predict, step
analysis, report), then times the report's parts separately on the demo's
own inputs: the pictures, the HTML (PNG encoding) and the PDF.  Also times
the SPICE export of models of growing order.

    python benchmarks/output_speed.py
    python benchmarks/output_speed.py --repeat 3

Prints figures only; nothing is asserted (timings are not tests).
"""

from __future__ import annotations

import os

for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import argparse  # noqa: E402
import tempfile  # noqa: E402
import time  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402

from benchfit.fitting.model import PlantModel  # noqa: E402
from benchfit.output.demo import run_demo  # noqa: E402
from benchfit.output.report import render_html, render_pdf  # noqa: E402
from benchfit.output.report_figures import report_figures  # noqa: E402
from benchfit.output.spice import spice_subcircuit  # noqa: E402

DATA = Path(__file__).resolve().parents[1] / "sample_data"


def _best(fn, repeat: int) -> tuple[float, object]:
    best, out = float("inf"), None
    for _ in range(repeat):
        t = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t)
    return best, out


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=1, help="runs per figure; the best is printed")
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        secs, res = _best(lambda: run_demo(DATA, Path(tmp) / "out"), args.repeat)
        print(f"demo, whole job (read, fit, design, 2000 draws, predict, step, report): {secs:7.2f} s")
        report = Path(res.files["report"])
        print(f"report.html size: {report.stat().st_size / 1e6:.2f} MB")

        from benchfit.data import read_sweep
        from benchfit.fitting.result import FitResult
        from benchfit.loop.design import Design
        from benchfit.output.report_inputs import ReportInputs

        d = Design.from_json(res.files["design"])
        fr = FitResult.from_json(res.files["fit"])
        inputs = ReportInputs(design=d, fit=fr, sweep=read_sweep(DATA / "buck_plant.csv"))
        secs, figs = _best(lambda: report_figures(inputs), args.repeat)
        print(f"report pictures ({len(figs)} figures, incl. re-drawing the Monte Carlo): {secs:7.2f} s")
        secs, html = _best(lambda: render_html(inputs, figs), args.repeat)
        print(f"HTML with embedded PNGs: {secs:7.2f} s ({len(html) / 1e6:.2f} MB)")
        secs, pdf = _best(lambda: render_pdf(inputs, figs), args.repeat)
        print(f"PDF: {secs:7.2f} s ({len(pdf) / 1e6:.2f} MB)")

    rng = np.random.default_rng(0)
    for order in (2, 6, 12, 24):
        w = 2 * np.pi * 10 ** rng.uniform(2, 6, order)
        m = PlantModel(zeros=-w[: order // 2] * 3, poles=-w, k=float(np.prod(w) / np.prod(3 * w[: order // 2])))
        secs, text = _best(lambda m=m: spice_subcircuit(m), max(args.repeat, 5))
        print(f"SPICE export, order {order:2d}: {secs * 1e3:7.2f} ms, {len(text.splitlines())} lines")


if __name__ == "__main__":
    main()
