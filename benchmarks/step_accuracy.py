"""Accuracy and speed of the step fit on synthetic second-order steps.

100 seeded scenarios: ζ uniform in [0.15, 0.9], fn log-uniform in [1, 20] kHz,
10 000 samples covering 10 % pre-trigger and about 2.5 settling times,
an unknown trigger offset (uniform in ±5 % of the record) and white Gaussian
noise of 1 % of the step.  Prints the relative errors of ζ and fn, how often
the ±2σ interval holds the truth, and the time to measure and fit one trace.

Targets (issue 5): ζ within 3 %, fn within 1 %, ±2σ coverage ≥ 90 %, a
10 000-sample trace in well under a second.

Run: OPENBLAS_NUM_THREADS=1 .venv/bin/python benchmarks/step_accuracy.py [--seeds N]
"""

from __future__ import annotations

import argparse
import time

import numpy as np

from benchfit.steps.fit import fit_step
from benchfit.steps.measure import measure_step
from benchfit.steps.models import second_order_step
from benchfit.steps.pm import phase_margin_from_zeta


def scenario(seed: int, n: int = 10_000, noise: float = 0.01):
    rng = np.random.default_rng(seed)
    zeta = rng.uniform(0.15, 0.9)
    fn = 10 ** rng.uniform(3.0, np.log10(20e3))
    settle = 4.0 / (zeta * 2 * np.pi * fn)          # 2 % settling of the envelope
    span = 2.5 * settle
    t = np.linspace(-0.1 * span, span, n)
    t0 = rng.uniform(-0.05, 0.05) * span             # trigger offset the fit does not know
    v0, step = rng.uniform(0.5, 5.0), rng.choice([-1, 1]) * rng.uniform(0.05, 0.5)
    y = second_order_step(t, zeta, fn, v0, step, t0) + noise * abs(step) * rng.standard_normal(n)
    return t, y, {"zeta": zeta, "fn_hz": fn, "t0_s": t0}


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seeds", type=int, default=100)
    args = ap.parse_args()
    err = {"zeta": [], "fn_hz": []}
    cover = {"zeta": [], "fn_hz": []}
    pm_err, times = [], []
    for seed in range(args.seeds):
        t, y, truth = scenario(seed)
        start = time.perf_counter()
        m = measure_step((t, y))
        f = fit_step((t, y), measurement=m)
        times.append(time.perf_counter() - start)
        for k in err:
            p = f.parameter(k)
            err[k].append((p.value - truth[k]) / truth[k])
            cover[k].append(abs(p.value - truth[k]) <= 2 * p.stderr)
        pm_err.append(phase_margin_from_zeta(f.value("zeta")) - phase_margin_from_zeta(truth["zeta"]))
    print(f"step fit accuracy over {args.seeds} seeds (1 % noise, unknown trigger offset, 10 000 samples)")
    for k, target in (("zeta", 0.03), ("fn_hz", 0.01)):
        e = np.abs(err[k])
        print(f"  {k:<6} |error| median {100 * np.median(e):.3f} %  95th pct {100 * np.percentile(e, 95):.3f} %"
              f"  max {100 * e.max():.3f} %  within {100 * target:g} %: {100 * np.mean(e <= target):.0f} % of seeds"
              f"  ±2σ coverage {100 * np.mean(cover[k]):.0f} %")
    pe = np.abs(pm_err)
    print(f"  phase-margin estimate vs exact from true ζ: median {np.median(pe):.3f} deg, max {pe.max():.3f} deg")
    tt = np.asarray(times)
    print(f"  time to measure + fit one 10 000-sample trace: median {1e3 * np.median(tt):.0f} ms, "
          f"max {1e3 * tt.max():.0f} ms")


if __name__ == "__main__":
    main()
