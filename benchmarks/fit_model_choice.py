"""Model choice of the automatic fit on plants with features at or above the band edge.

Cases (all scenarios of our own, plus scikit-rf's shipped Touchstone files):

* ``two-pole``: 1/((1+s/ω1k)(1+s/ωp2)) over 10 Hz..100 kHz, 201 log points,
  0.01 dB / 0.05° noise, the second pole at 2, 3.5, 5 and 10 times the top
  frequency; printed per ratio: worst reduced χ² over the seeds, worst error
  of the 1 kHz pole, how many seeds kept the second pole.
* ``buck``: a peak-current-mode buck control-to-output plant (gain 8, pole
  400 Hz, ESR zero 25 kHz, pair 250 kHz Q 1.2, 300 ns delay; 601 log points
  20 Hz..500 kHz; 0.15 dB / 0.8° noise); printed: seeds that found the true
  structure, worst reduced χ², and per parameter the share of seeds whose
  truth lies inside the reported ±2σ (a seed with another structure counts
  as a miss for every parameter it lacks).
* ``skrf``: scikit-rf's shipped files; printed: order, reduced χ², residual
  over floor, warnings.

    python benchmarks/fit_model_choice.py [--seeds 10] [--buck-seeds 60] [--first-seed 0]
        [--cases two-pole,buck,skrf]

Prints figures only; nothing is asserted.
"""

from __future__ import annotations

import os

for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ[_var] = "1"  # pin BLAS before numpy loads

import argparse  # noqa: E402
import time  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402

from benchfit.fitting import fit  # noqa: E402
from benchfit.fitting.synthetic import from_factors, sweep  # noqa: E402

BUCK_TRUTH = {"gain": 8.0, "pole1_hz": 400.0, "zero1_hz": 25e3, "pair1_f0_hz": 250e3,
              "pair1_q": 1.2, "delay_s": 300e-9}


def buck_plant():
    """The buck control-to-output plant of the module docstring."""
    return from_factors(8.0, poles_hz=(400.0,), zeros_hz=(25e3,), pairs=((250e3, 1.2),),
                        delay_s=300e-9, step="buck_plant")


def buck_sweep(seed: int, points: int = 601):
    f = np.geomspace(20.0, 500e3, points)
    return sweep(buck_plant(), f, noise_db=0.15, noise_deg=0.8, rng=np.random.default_rng(seed))


def two_pole_sweep(ratio: float, seed: int):
    f = np.geomspace(10.0, 100e3, 201)
    m = from_factors(1.0, poles_hz=(1e3, ratio * 100e3))
    return sweep(m, f, noise_db=0.01, noise_deg=0.05, rng=np.random.default_rng(seed))


def coverage(res, truth: dict[str, float]) -> dict[str, bool]:
    """Per true parameter: inside the reported ±2σ (False when absent or σ unknown)."""
    out = {}
    for name, want in truth.items():
        try:
            p = res.parameter(name)
        except (KeyError, ValueError):
            out[name] = False
            continue
        out[name] = bool(p.stderr is not None and np.isfinite(p.stderr)
                         and abs(p.value - want) <= 2.0 * p.stderr)
    return out


def run_two_pole(seeds: range) -> None:
    print("two-pole family: 1 kHz pole + pole at ratio x 100 kHz (201 pts, 0.01 dB / 0.05 deg)")
    for ratio in (2.0, 3.5, 5.0, 10.0):
        worst_chi, worst_err, kept, t = 0.0, 0.0, 0, []
        for seed in seeds:
            t0 = time.process_time()
            res = fit(two_pole_sweep(ratio, seed))
            t.append(time.process_time() - t0)
            worst_chi = max(worst_chi, res.stats["reduced_chi2"])
            low = min(abs(p) for p in res.model.poles) / (2 * np.pi)
            worst_err = max(worst_err, abs(low / 1e3 - 1.0))
            kept += int(res.stats["order"] >= 2)
        print(f"  ratio {ratio:4.1f}: worst reduced chi2 {worst_chi:8.3f}  worst 1 kHz pole error "
              f"{100 * worst_err:.3f} %  second pole kept {kept}/{len(seeds)}  "
              f"median {1e3 * float(np.median(t)):.0f} ms")


def run_buck(seeds: range) -> None:
    print(f"buck control-to-output plant, {len(seeds)} seeds (601 pts, 0.15 dB / 0.8 deg)")
    hits = {k: 0 for k in BUCK_TRUTH}
    right, worst, warned_high, high, t = 0, 0.0, 0, 0, []
    misses = []
    for seed in seeds:
        t0 = time.process_time()
        res = fit(buck_sweep(seed))
        t.append(time.process_time() - t0)
        names = {p.name for p in res.parameters}
        ok = names == set(BUCK_TRUTH)
        right += ok
        if not ok:
            misses.append(seed)
        rc = res.stats["reduced_chi2"]
        worst = max(worst, rc)
        if rc > 1.5:
            high += 1
            warned_high += any("noise floor" in w for w in res.warnings)
        for k, v in coverage(res, BUCK_TRUTH).items():
            hits[k] += v
    n = len(seeds)
    print(f"  true structure {right}/{n}; worst reduced chi2 {worst:.2f}; "
          f"above 1.5: {high} (warned {warned_high}); median {1e3 * float(np.median(t)):.0f} ms")
    print("  inside +-2 sigma: " + ", ".join(f"{k} {100 * v / n:.0f} %" for k, v in hits.items()))
    if misses:
        print(f"  other structure on seeds {misses}")


SKRF_CASES = (("ntwk1.s2p", "S21"), ("ntwk1.s2p", "S11"), ("ind.s2p", "S21"),
              ("open.s2p", "S21"), ("ring slot.s2p", "S11"), ("line.s2p", "S21"),
              ("ro,3.s1p", "S11"))


def run_skrf() -> None:
    from benchfit.data import read_sweep

    try:
        import skrf
    except ImportError:
        print("scikit-rf not installed: skrf cases skipped")
        return
    root = Path(skrf.__file__).parent / "data"
    print("scikit-rf shipped files (automatic order and delay)")
    for name, param in SKRF_CASES:
        resp = read_sweep(root / name, param=param)
        t0 = time.process_time()
        try:
            res = fit(resp)
        except Exception as e:  # noqa: BLE001 - a figure, not a test
            print(f"  {name:16s} {param}: {type(e).__name__}: {e}")
            continue
        dt = time.process_time() - t0
        print(f"  {name:16s} {param}: order {res.stats['order']:2d}  delay "
              f"{res.stats['delay_s']:.3g} s  reduced chi2 {res.stats['reduced_chi2']:.3g}  "
              f"over floor {res.stats['residual_over_floor']:.3g}  {1e3 * dt:.0f} ms  "
              f"warnings {len(res.warnings)}")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seeds", type=int, default=10)
    ap.add_argument("--buck-seeds", type=int, default=60)
    ap.add_argument("--first-seed", type=int, default=0)
    ap.add_argument("--cases", default="two-pole,buck,skrf")
    a = ap.parse_args()
    cases = a.cases.split(",")
    if "two-pole" in cases:
        run_two_pole(range(a.first_seed, a.first_seed + a.seeds))
    if "buck" in cases:
        run_buck(range(a.first_seed, a.first_seed + a.buck_seeds))
    if "skrf" in cases:
        run_skrf()


if __name__ == "__main__":
    main()
