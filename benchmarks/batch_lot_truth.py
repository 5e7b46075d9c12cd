"""How well a generated lot's batch rows agree with the units' true loops.

Generates the same lot as ``batch_scaling.py`` (seed 7, 401-point plant sweeps
with 0.4 % noise), runs it through the batch task (fit, loop with the lot's
design, margins, limits) and compares every row with the unit's true loop:
generating model × lot compensator × divider, noiseless and densely sampled,
whose margins come from python-control's ``stability_margins`` (general-purpose
reference library).  Prints status counts (table against truth), margin errors,
the fitted orders and delays against the generating model (order 2, delay
0.5/fsw = 1 µs), and every unit whose fit took another shape.

    python benchmarks/batch_lot_truth.py                 # 200 units
    python benchmarks/batch_lot_truth.py --units 1000    # the benchmark's whole lot

Prints figures only; nothing is asserted.
"""

from __future__ import annotations

import os

for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import argparse  # noqa: E402
import json  # noqa: E402
import tempfile  # noqa: E402
import time  # noqa: E402
from collections import Counter  # noqa: E402
from pathlib import Path  # noqa: E402

import control  # noqa: E402
import numpy as np  # noqa: E402

from benchfit.batch.limits import parse_limits  # noqa: E402
from benchfit.batch.runner import find_sweeps, run_lot  # noqa: E402
from benchfit.batch.synth_lot import NOMINAL, lot_design, make_lot, unit_sweep  # noqa: E402
from benchfit.batch.table import read_table  # noqa: E402
from benchfit.batch.task import TaskSettings, design_loop_from_dict  # noqa: E402

# The same limits as batch_scaling.py (common practice, no source).
PM_MIN, GM_MIN, FC_BAND = 45.0, 6.0, (15e3, 40e3)
LIMITS = (f"[margins]\nmin_phase_margin_deg = {PM_MIN}\nmin_gain_margin_db = {GM_MIN}\n"
          f"crossover_hz = [{FC_BAND[0]}, {FC_BAND[1]}]\n")
TRUE_ORDER = 2
TRUE_DELAY_S = 0.5 / NOMINAL["fsw_hz"]


def true_margins(seed: int, index: int) -> tuple[float, float, float]:
    """(PM deg, crossover Hz, GM dB) of the unit's noiseless loop, by python-control."""
    true = unit_sweep(seed, index, quantity="loop", noise=0.0, points=4001, f_min_hz=10, f_max_hz=1e6)
    gm, pm, _sm, _wpc, wgc, _wms = control.stability_margins(
        control.frd(true.response, 2 * np.pi * true.freq_hz))
    return float(pm), float(wgc) / (2 * np.pi), 20 * np.log10(float(gm))


def _num(x) -> float:
    try:
        return float(x)
    except (TypeError, ValueError):
        return float("nan")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--units", type=int, default=200)
    ap.add_argument("--seed", type=int, default=7)
    ap.add_argument("--workers", type=int, default=1)
    args = ap.parse_args()
    with tempfile.TemporaryDirectory(prefix="benchfit-truth-") as tmp:
        make_lot(Path(tmp) / "lot", args.units, seed=args.seed)
        settings = TaskSettings(design=design_loop_from_dict(lot_design()),
                                limits=parse_limits(LIMITS))
        out = Path(tmp) / "results.csv"
        t0, c0 = time.perf_counter(), time.process_time()
        info = run_lot(find_sweeps(Path(tmp) / "lot"), settings, out, workers=args.workers,
                       progress=None)
        wall, cpu = time.perf_counter() - t0, time.process_time() - c0
        rows = sorted(read_table(out)[1], key=lambda r: r["file"])
    print(f"lot seed {args.seed}: {len(rows)} units, {info.executor} with {args.workers} worker(s), "
          f"{wall:.1f} s wall ({1e3 * wall / len(rows):.0f} ms per unit; main-process CPU "
          f"{cpu:.1f} s); status {dict(sorted(info.counts.items()))}")

    idx = [int(Path(r["file"]).stem.rsplit("_", 1)[1]) for r in rows]
    truth = np.array([true_margins(args.seed, i) for i in idx])
    t_status = ["pass" if (pm >= PM_MIN and gm >= GM_MIN and FC_BAND[0] <= fc <= FC_BAND[1])
                else "fail" for pm, fc, gm in truth]
    print("table status against the true loop's:",
          dict(Counter((r["status"], t) for r, t in zip(rows, t_status, strict=True))))
    print(f"true loops: PM {truth[:, 0].min():.1f}..{truth[:, 0].max():.1f} deg, crossover "
          f"{truth[:, 1].min():.4g}..{truth[:, 1].max():.4g} Hz, GM {truth[:, 2].min():.1f}.."
          f"{truth[:, 2].max():.1f} dB")
    got = np.array([[_num(r["phase_margin_deg"]), _num(r["crossover_hz"]), _num(r["gain_margin_db"])]
                    for r in rows])
    err = np.column_stack([got[:, 0] - truth[:, 0], got[:, 1] / truth[:, 1] - 1,
                           got[:, 2] - truth[:, 2]])
    for k, name in enumerate(("PM error, deg", "crossover error, relative", "GM error, dB")):
        e = err[np.isfinite(err[:, k]), k]
        if e.size:
            p = np.percentile(e, [1, 50, 99])
            print(f"  {name:26s} p1 {p[0]:+.3g}  p50 {p[1]:+.3g}  p99 {p[2]:+.3g}  "
                  f"max |e| {np.abs(e).max():.3g}  (n {e.size})")
    orders = Counter(r["fit_order"] for r in rows)
    delays = np.array([_num(r["fit_delay_s"]) for r in rows])
    rms = np.array([_num(r["fit_rms_db"]) for r in rows])
    print(f"fitted order {dict(sorted(orders.items(), key=str))} (generating model: {TRUE_ORDER}); "
          f"delay p1/p50/p99 {np.percentile(delays, [1, 50, 99])} s (true {TRUE_DELAY_S:g} s); "
          f"rms p50 {np.median(rms):.4f} dB, max {rms.max():.4f} dB")
    odd = [(i, r) for i, r in zip(idx, rows, strict=True)
           if r["fit_order"] != TRUE_ORDER or abs(_num(r["fit_delay_s"]) / TRUE_DELAY_S - 1) > 0.05]
    print(f"units fitted with another shape than order {TRUE_ORDER} + {TRUE_DELAY_S:g} s delay: "
          f"{len(odd)}")
    for i, r in odd:
        params = ", ".join(f"{k} {v[0]:.4g}" for k, v in json.loads(r["parameters"]).items())
        k = idx.index(i)
        print(f"  unit {i} (seed {args.seed}): order {r['fit_order']}, delay {r['fit_delay_s']:g} s, "
              f"rms {r['fit_rms_db']:.4f} dB, PM {got[k, 0]:.2f} (true {truth[k, 0]:.2f}), "
              f"status {r['status']}; {params}; warnings: {r['warnings']}")
    errs = Counter(r["error"] for r in rows if r["status"] == "error")
    for e, n in errs.most_common(5):
        print(f"  error x{n}: {e}")


if __name__ == "__main__":
    main()
