"""How well the per-point noise σ estimated from a sweep's own scatter matches the truth.

benchfit.fitting.weights.scatter_sigma on synthetic sequences of known σ:

* white noise of one σ (a flat floor) at 201, 401 and 1601 points: how often the
  flat estimate is chosen, and the lowest estimated σ along the sweep over the
  truth (median over seeds; a low stretch gives its points too much weight);
* a floor rising geometrically by 4x and 10x over 401 points: the running
  estimate over the truth at the first, middle and last point (median over
  seeds) and its 5th/95th percentiles over all points.

    python benchmarks/noise_sigma.py [--seeds 200]

Prints figures only; nothing is asserted.
"""

from __future__ import annotations

import argparse

import numpy as np

from benchfit.fitting.weights import scatter_sigma


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seeds", type=int, default=200)
    args = ap.parse_args()
    print("flat floor (white noise, σ = 1):")
    for n in (201, 401, 1601):
        flat, lowest, spread = 0, [], []
        for seed in range(args.seeds):
            s = scatter_sigma(np.random.default_rng(seed).standard_normal(n))
            flat += np.ptp(s) == 0
            lowest.append(s.min())
            spread.append(np.std(np.log(s)))
        print(f"  {n:5d} points: flat estimate chosen {flat}/{args.seeds}; lowest σ / truth, "
              f"median {np.median(lowest):.3f} (1st percentile {np.percentile(lowest, 1):.3f}); "
              f"sd of ln σ along the sweep, median {np.median(spread):.3f}")
    print("rising floor, 401 points:")
    n = 401
    for rise in (4.0, 10.0):
        true = np.geomspace(1.0, rise, n)
        r = np.array([scatter_sigma(true * np.random.default_rng(s).standard_normal(n)) / true
                      for s in range(args.seeds)])
        ends = np.median(r[:, [0, n // 2, -1]], axis=0)
        p5, p95 = np.percentile(r, [5, 95])
        print(f"  x{rise:g}: estimate / truth at first, middle, last point {ends.round(3)}; "
              f"5th..95th percentile over all points {p5:.3f}..{p95:.3f}")


if __name__ == "__main__":
    main()
