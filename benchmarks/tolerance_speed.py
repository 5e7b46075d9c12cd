"""Speed of the tolerance Monte Carlo: draws per second for Type II/III loops.

Builds our own buck scenario (12 V, 10 uH, 100 uF, 20 mohm ESR), designs a
network for it, and times :func:`benchfit.loop.tolerance.monte_carlo` for a
few draw counts, with an ideal and a finite op-amp, one and three plant
corners, and with plant uncertainty drawn from a fit of a noisy sweep.

    python benchmarks/tolerance_speed.py
    python benchmarks/tolerance_speed.py --draws 1000,10000,50000 --repeat 5

Prints figures only; nothing is asserted (timings are not tests).
"""

from __future__ import annotations

import os

for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import argparse  # noqa: E402
import time  # noqa: E402

import numpy as np  # noqa: E402

from benchfit.data.response import FrequencyResponse  # noqa: E402
from benchfit.fitting import fit  # noqa: E402
from benchfit.fitting.model import PlantModel  # noqa: E402
from benchfit.loop.featuregrid import feature_grid  # noqa: E402
from benchfit.loop.loopgain import LoopPlant  # noqa: E402
from benchfit.loop.opamp import OpAmp  # noqa: E402
from benchfit.loop.sensing import Sensing  # noqa: E402
from benchfit.loop.synthesis import Targets, synthesize  # noqa: E402
from benchfit.loop.tolerance import monte_carlo  # noqa: E402


def buck(r_load: float = 1.0) -> PlantModel:
    L, C, esr, vin = 10e-6, 100e-6, 0.02, 12.0
    w0 = 1 / np.sqrt(L * C)
    wz = 1 / (esr * C)
    return PlantModel(zeros=np.array([-wz]),
                      poles=np.roots([1, w0 / (r_load * np.sqrt(C / L)), w0 ** 2]),
                      k=vin * w0 ** 2 / wz)


def best_time(fn, repeat: int) -> tuple[float, float]:
    """Best wall-clock and best CPU time of ``repeat`` runs (CPU time is what a
    shared, loaded machine does not inflate)."""
    wall = cpu = np.inf
    for _ in range(repeat):
        t0, c0 = time.perf_counter(), time.process_time()
        fn()
        wall = min(wall, time.perf_counter() - t0)
        cpu = min(cpu, time.process_time() - c0)
    return wall, cpu


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--draws", default="1000,10000", help="comma-separated draw counts")
    ap.add_argument("--repeat", type=int, default=3, help="best of this many runs")
    args = ap.parse_args()
    counts = [int(x) for x in args.draws.split(",")]
    div = Sensing.divider(30e3, 10e3)
    one = [LoopPlant(buck(), div, band_hz=(10, 1e6))]
    three = [LoopPlant(buck(r), div, band_hz=(10, 1e6), name=f"{r} ohm") for r in (0.5, 1.0, 10.0)]
    rng = np.random.default_rng(1)
    f = np.logspace(1, 6, 401)
    noisy = buck().response(f) * (1 + 0.005 * (rng.standard_normal(401) + 1j * rng.standard_normal(401)))
    t0 = time.perf_counter()
    fr = fit(FrequencyResponse(f, noisy, quantity="plant"))
    fit_s = time.perf_counter() - t0
    fitted = [LoopPlant(fr.model, div, band_hz=(10, 1e6), draws=fr.draw_responses)]
    targets = Targets(20e3, 55, 10)
    print(f"(fit of the noisy 401-point sweep for the plant-uncertainty rows: {fit_s:.2f} s)")
    print(f"{'network':8}{'op-amp':>10}{'corners':>9}{'plant':>8}{'grid':>6}{'draws':>8}"
          f"{'wall s':>9}{'cpu s':>8}{'draws/cpu s':>13}")
    for kind in ("type2", "type3"):
        for op in (None, OpAmp(gbw_hz=10e6)):
            for label, corners in (("1", one), ("3", three), ("fit", fitted)):
                net = synthesize(kind, corners[0], Targets(20e3 if kind == "type3" else 5e3, 50, 6),
                                 opamp=op).network
                grid = feature_grid(corners[0], net, op).size
                for n in counts:
                    wall, cpu = best_time(lambda n=n, c=corners, net=net, op=op: monte_carlo(
                        c, net, op, targets, r_tol=0.01, c_tol=0.1, draws=n, seed=1), args.repeat)
                    print(f"{kind:8}{'ideal' if op is None else '10 MHz':>10}"
                          f"{len(corners):>9}{'fit' if label == 'fit' else 'model':>8}{grid:>6}"
                          f"{n:>8}{wall:>9.3f}{cpu:>8.3f}{n / cpu:>13.0f}")


if __name__ == "__main__":
    main()
