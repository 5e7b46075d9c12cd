"""Accuracy and calibration of benchfit's fit over many noise seeds.

The 8th-order converter-like plant of benchfit.fitting.synthetic, 1601 log
points over 10 Hz..10 MHz, 0.1 dB and 0.5 deg Gaussian noise per point, one
fit per seed with the defaults (automatic order, automatic delay).  Printed:

* how many seeds converged and found the true order (8 poles, no delay);
* median and worst pole-frequency error (|p| matched by sorting);
* residual over the estimated noise floor (median and worst);
* how many fits ended with mirrored right-half-plane poles;
* calibration: the fraction of seeds whose true parameter lies inside the
  reported ±2σ interval, per parameter and overall (Gaussian: 95.4 %);
* time per fit (wall and CPU: a loaded machine inflates the first), after one
  untimed warm-up fit;
* the seeds that missed (wrong order or pole error above 1.5 %).

    python benchmarks/fit_accuracy.py [--seeds 100] [--delay-seeds 20]

Prints figures only; nothing is asserted (statistics and timings are not tests).
"""

from __future__ import annotations

import os

for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ[_var] = "1"  # pin BLAS before numpy loads

import argparse  # noqa: E402
import time  # noqa: E402

import numpy as np  # noqa: E402

from benchfit.fitting import fit  # noqa: E402
from benchfit.fitting.parameters import from_zpk, log_jacobian  # noqa: E402
from benchfit.fitting.synthetic import converter_plant, sweep  # noqa: E402

#: The plant's physical parameters (benchfit.fitting.synthetic.converter_plant).
TRUTH = {"gain": 10.0, "pole1_hz": 300e3, "pole2_hz": 3e6, "pair1_f0_hz": 20e3, "pair1_q": 3.0,
         "pair2_f0_hz": 1e6, "pair2_q": 1.5, "pair3_f0_hz": 6e6, "pair3_q": 0.8,
         "zero1_hz": 60e3, "zero2_hz": -2e6}


def _pole_freq_error(got, want) -> float:
    got, want = np.sort(np.abs(got)), np.sort(np.abs(want))
    if got.shape != want.shape:
        return float("inf")
    return float(np.max(np.abs(got - want) / want))


def _expected_max_z(n: int) -> float:
    """Median of the largest |z| among n standard normal draws."""
    from scipy.stats import norm

    return float(norm.ppf(0.5 + 0.5 * 0.5 ** (1.0 / n)))


def cramer_rao(delay_s: float) -> dict[str, float]:
    """Relative σ of each pole frequency no unbiased estimator can beat on this data.

    The Fisher information of the parameters for the benchmark's noise (Gaussian,
    0.1 dB on ln|H|, 0.5° on the phase, independent per point) is JᵀWJ with J the
    Jacobian of ln H at the true parameters; its inverse bounds the covariance
    (Cramér–Rao; e.g. S. M. Kay, *Fundamentals of Statistical Signal Processing:
    Estimation Theory*, 1993, ch. 3).
    """
    m = converter_plant(delay_s=delay_s)
    st, v = from_zpk(m.zeros, m.poles, m.k, delay_s, delay=delay_s > 0)
    f = np.geomspace(10.0, 10e6, 1601)
    j = log_jacobian(st, v, 2j * np.pi * f)
    sig_m, sig_p = 0.1 * np.log(10.0) / 20.0, np.radians(0.5)
    fisher = (j.real.T @ j.real) / sig_m ** 2 + (j.imag.T @ j.imag) / sig_p ** 2
    sd = np.sqrt(np.diag(np.linalg.inv(fisher)))
    return {nm: float(sd[i] / abs(v[i])) for i, nm in enumerate(st.names)
            if nm.endswith("_hz") and nm.startswith(("pole", "pair"))}


def run(seeds: int, delay_s: float) -> None:
    truth = converter_plant(delay_s=delay_s)
    truth_params = dict(TRUTH, **({"delay_s": delay_s} if delay_s else {}))
    errs, ratios, times, cpu, right_order, converged = [], [], [], [], 0, 0
    shape_bad, worst_param, mirrored = [], {}, 0
    inside = {k: 0 for k in truth_params}
    counted = {k: 0 for k in truth_params}
    for seed in range(seeds):
        data = sweep(truth, noise_db=0.1, noise_deg=0.5, rng=np.random.default_rng(1000 + seed))
        t0, c0 = time.perf_counter(), time.process_time()
        res = fit(data)
        times.append(time.perf_counter() - t0)
        cpu.append(time.process_time() - c0)
        converged += bool(res.stats["converged"])
        mirrored += res.stats["mirrored_poles"] > 0
        ok = res.stats["order"] == 8 and (res.model.delay_s > 0) == (delay_s > 0)
        right_order += ok
        if not ok:
            shape_bad.append(f"{1000 + seed} (order {res.stats['order']}, delay "
                             f"{res.model.delay_s * 1e9:.3g} ns)")
        ratios.append(res.stats["residual_over_floor"])
        errs.append(_pole_freq_error(res.model.poles, truth.poles))
        if ok and errs[-1] > 0.015:
            # Which pole frequency is off, and by how many of its own reported σ.
            name, want = max(((k, v) for k, v in truth_params.items() if k.endswith("_hz")
                              and k.startswith(("pole", "pair"))),
                             key=lambda kv: abs(res.parameter(kv[0]).value / kv[1] - 1))
            p = res.parameter(name)
            worst_param[1000 + seed] = (f"{name} {100 * (p.value / want - 1):+.2f} %, "
                                        f"σ {100 * p.stderr / want:.2f} %, "
                                        f"z {(p.value - want) / p.stderr:+.1f}")
        if ok:
            for name, want in truth_params.items():
                try:
                    p = res.parameter(name)
                except KeyError:
                    continue
                counted[name] += 1
                inside[name] += bool(np.isfinite(p.stderr) and abs(p.value - want) <= 2 * p.stderr)
    errs_a = np.array(errs)
    fin = errs_a[np.isfinite(errs_a)]
    label = f"delay {delay_s * 1e9:g} ns" if delay_s else "no delay"
    print(f"\n{label}: {seeds} seeds, 0.1 dB / 0.5 deg noise, 1601 points")
    print(f"   converged: {converged}/{seeds}; true order (8 poles, "
          f"{'with' if delay_s else 'no'} delay): {right_order}/{seeds}")
    if fin.size:
        print(f"   pole-frequency error (seeds with 8 poles): median {np.median(fin) * 100:.3f} %, "
              f"worst {np.max(fin) * 100:.3f} %")
    print(f"   fits that ended with mirrored poles (and so were refitted unmirrored): {mirrored}")
    print(f"   residual / noise floor: median {np.median(ratios):.3f}, worst {np.max(ratios):.3f}")
    total_in = sum(inside.values())
    total = sum(counted.values())
    print(f"   truth inside ±2σ: overall {total_in}/{total} = {100 * total_in / max(total, 1):.1f} %")
    print("   per parameter: " + ", ".join(
        f"{k} {100 * inside[k] / counted[k]:.0f}%" for k in truth_params if counted[k]))
    print(f"   time per fit: median {np.median(times) * 1e3:.0f} ms, worst {np.max(times) * 1e3:.0f} ms "
          f"wall; CPU median {np.median(cpu) * 1e3:.0f} ms, worst {np.max(cpu) * 1e3:.0f} ms")
    bad = [f"{1000 + i}" for i, e in enumerate(errs) if not np.isfinite(e) or e > 0.015]
    if bad:
        print(f"   seeds with a wrong order or a pole error above 1.5 %: {', '.join(bad)}")
    for seed, text in worst_param.items():
        print(f"     seed {seed}: {text}")
    bound = cramer_rao(delay_s)
    name = max(bound, key=bound.get)
    print(f"   Cramér–Rao bound on the pole frequencies: loosest {name} σ ≥ "
          f"{100 * bound[name]:.2f} %; so the worst of {seeds} seeds is expected near "
          f"{100 * bound[name] * _expected_max_z(seeds):.2f} % for any unbiased estimator")
    if shape_bad:
        print(f"   seeds fitted with another shape: {', '.join(shape_bad)}")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--seeds", type=int, default=100)
    ap.add_argument("--delay-seeds", type=int, default=20)
    args = ap.parse_args()
    # One untimed fit first: the first call pays for lazy imports and caches.
    fit(sweep(converter_plant(), noise_db=0.1, noise_deg=0.5, rng=np.random.default_rng(1)))
    run(args.seeds, 0.0)
    if args.delay_seeds:
        run(args.delay_seeds, 150e-9)


if __name__ == "__main__":
    main()
