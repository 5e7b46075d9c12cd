"""Verdicts, margins and yields on loops with known truth (the cases of issue 19).

    python benchmarks/verdicts.py            # about a minute on one core
    python benchmarks/verdicts.py --draws 2000

Cases (scenarios of our own, tests/verdict_cases.py):

1. a raw loop sweep with two integrators, K(1+s/ω300)/(s²(1+s/ω10k)), 801 points
   10 Hz-100 kHz, 0.1 dB / 0.5° noise, 10 seeds: integrator count, verdict and
   phase margin against python-control on the true loop;
2. a velocity servo (Q = 15 resonance at 1.5 kHz, 150 µs delay or none), PI: the
   Monte Carlo at zero tolerance against the nominal margins, and its yield for gain-margin
   targets around the nominal against an independent Monte Carlo (same draws, same parts,
   python-control margins, no slack); the corner-only grid the Monte Carlo used before
   (40 points/decade around the network's corners) for comparison;
3. no slack: targets_met and the yield for gain-margin targets just above and below
   the snapped gain margin;
5. the servo with an automatic crossover chosen on the main crossover only
   (``crossings="main"``), whose resonance then crosses 0 dB again: yield counting every
   crossing, the main crossover only, and the independent Monte Carlo; and the crossover
   synthesis picks when every crossing counts (the default);
6. the model-free overshoot of a noisy step (ζ = 0.8, true 1.52 %) and the noise of a
   trace with 1 mV codes (true 5 mV).

Case 4 (a missed delay in the fit) belongs to the fitting benchmarks.  Prints
figures only; nothing is asserted (tests/test_verdicts.py and
tests/test_step_bias.py hold the checks).
"""

from __future__ import annotations

import os

for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import argparse  # noqa: E402
import math  # noqa: E402
import sys  # noqa: E402
import warnings  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402

sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "tests"))  # the shared cases

from verdict_cases import (  # noqa: E402
    double_integrator_loop,
    independent_yield,
    noisy,
    servo_plant,
    true_crossings,
    true_stable,
)

from benchfit.loop.design import check_parts, design  # noqa: E402
from benchfit.loop.loopgain import LoopPlant  # noqa: E402
from benchfit.loop.margins import margins_from_data  # noqa: E402
from benchfit.loop.synthesis import Targets  # noqa: E402
from benchfit.loop.tolerance import monte_carlo  # noqa: E402
from benchfit.steps.measure import measure_step  # noqa: E402


def corner_grid(net) -> np.ndarray:
    """The grid the Monte Carlo used before: 40/decade, three decades around the corners."""
    c = net.corners_hz()
    f = c["zeros_hz"] + c["poles_hz"] + [net.integrator_hz()]
    lo, hi = min(f) / 1e3, max(f) * 1e3
    return np.logspace(math.log10(lo), math.log10(hi), int(math.ceil(math.log10(hi / lo) * 40)) + 1)


def case1() -> None:
    print("1. raw sweep, two integrators (truth: python-control on the true loop)")
    model = double_integrator_loop()
    f = np.logspace(1, 5, 801)
    pm_ref = true_crossings(model, 10, 1e5)[0][0]
    print(f"   truth: stable {true_stable(model)[0]}, 2 integrators, PM {pm_ref:.2f} deg")
    print(f"   {'seed':>4} {'n':>2} {'verdict':>9} {'PM':>7} {'PM-truth':>9}")
    for seed in range(10):
        m = margins_from_data(f, noisy(model.response(f), 0.1, 0.5, seed))
        print(f"   {seed:4d} {m.integrators:2d} {m.verdict:>9} {m.phase_margin_deg:7.2f} "
              f"{m.phase_margin_deg - pm_ref:+9.2f}")


def case2(draws: int, delay_s: float, fc: float) -> None:
    print(f"2. servo, Q = 15 resonance, delay {delay_s * 1e6:g} us, PI at {fc:g} Hz: Monte Carlo grid")
    plant = servo_plant(delay_s)
    lp = LoopPlant(plant, band_hz=(1, 100e3))
    d = design(lp, "pi", Targets(fc, 40, 6), draws=0)
    net, nom = d.snapped.network, d.snapped.worst_margins()
    z = monte_carlo(lp, net, None, d.targets, r_tol=0, c_tol=0, draws=5, seed=1)
    zc = monte_carlo(lp, net, None, d.targets, r_tol=0, c_tol=0, draws=5, seed=1,
                     freq_hz=corner_grid(net))
    print(f"   nominal GM {nom.gain_margin_db:.3f} dB, PM {nom.phase_margin_deg:.3f} deg")
    print(f"   zero tolerance, feature grid: median GM {z.percentiles['gm_db']['p50']:.3f} dB, "
          f"PM {z.percentiles['pm_deg']['p50']:.3f} deg")
    print(f"   zero tolerance, corner grid:  median GM {zc.percentiles['gm_db']['p50']:.3f} dB, "
          f"PM {zc.percentiles['pm_deg']['p50']:.3f} deg")
    print(f"   {'GM target':>10} {'yield':>7} {'corner grid':>12} {'independent':>12}")
    for dgm in (-0.5, -0.2, 0.0, 0.2):
        t = Targets(fc, 40.0, nom.gain_margin_db + dgm)
        s = monte_carlo(lp, net, None, t, r_tol=0.01, c_tol=0.05, draws=draws, seed=5)
        sc = monte_carlo(lp, net, None, t, r_tol=0.01, c_tol=0.05, draws=draws, seed=5,
                         freq_hz=corner_grid(net))
        ref = independent_yield(plant, "pi", net.parts, 40.0, t.gain_margin_db, 0.01,
                                0.05, draws, 5)[0]
        print(f"   {t.gain_margin_db:10.2f} {s.yield_fraction * 100:6.1f}% "
              f"{sc.yield_fraction * 100:11.1f}% {ref * 100:11.1f}%")


def case3() -> None:
    print("3. no slack: the snapped servo parts against gain-margin targets near their margin")
    lp = LoopPlant(servo_plant(), band_hz=(1, 100e3))
    d = design(lp, "pi", Targets(120.0, 40, 6), draws=0)
    gm = d.snapped.worst_margins().gain_margin_db
    for dgm in (-0.05, -0.01, 0.01, 0.05):
        t = Targets(120.0, 40.0, gm + dgm)
        c = check_parts(lp, d.snapped.network, targets=t)
        s = monte_carlo(lp, d.snapped.network, None, t, r_tol=0, c_tol=0, draws=5, seed=1)
        msg = next((w for w in c.warnings if "gain margin" in w and "target" in w), "")
        print(f"   GM {gm:.3f} vs target {t.gain_margin_db:.3f}: targets_met {c.targets_met}, "
              f"zero-tolerance yield {s.yield_fraction * 100:.0f}%  {msg}")


def case5(draws: int) -> None:
    print("5. servo, automatic crossover judged on the main crossover only: the resonance "
          "crosses 0 dB again")
    lp = LoopPlant(servo_plant(), band_hz=(1, 100e3))
    every = design(lp, "pi", Targets(None, 50, 6), draws=0)
    print(f"   (judged on every crossing, the default, synthesis picks "
          f"{every.synthesis.crossover_hz:.1f} Hz: targets_met {every.targets_met})")
    d = design(lp, "pi", Targets(None, 50, 6), draws=0, crossings="main")
    print(f"   placed for {d.synthesis.crossover_hz:.1f} Hz; snapped parts:")
    m = d.snapped.worst_margins()
    for c in m.crossings:
        if c["kind"] == "gain":
            print(f"   gain crossing {c['freq_hz']:9.2f} Hz  PM {c['value']:8.2f} deg"
                  + (" (main)" if c.get("main") else ""))
    print(f"   targets_met {d.targets_met} (main crossover only)")
    s_all = monte_carlo(lp, d.snapped.network, None, d.targets, r_tol=0.01, c_tol=0.05,
                        draws=draws, seed=3)
    s_main = monte_carlo(lp, d.snapped.network, None, d.targets, r_tol=0.01, c_tol=0.05,
                         draws=draws, seed=3, crossings="main")
    ref = independent_yield(servo_plant(), "pi", d.snapped.network.parts, 50.0, 6.0, 0.01, 0.05,
                            draws, 3)[0]
    print(f"   yield: every crossing {s_all.yield_fraction * 100:.1f}%, main only "
          f"{s_main.yield_fraction * 100:.1f}%, independent {ref * 100:.1f}%")


def case6() -> None:
    print("6. model-free step: overshoot on noise, noise with ADC codes")
    zeta, fn = 0.8, 2e3
    t = -400e-6 + 1e-6 * np.arange(4000)
    wn = 2 * math.pi * fn
    wd = wn * math.sqrt(1 - zeta ** 2)
    tt = np.maximum(t, 0)
    clean = np.where(t >= 0, 1 - np.exp(-zeta * wn * tt) * (np.cos(wd * tt) + zeta / math.sqrt(
        1 - zeta ** 2) * np.sin(wd * tt)), 0.0)
    truth = 100 * math.exp(-math.pi * zeta / math.sqrt(1 - zeta ** 2))
    for noise in (2e-3, 5e-3, 10e-3):
        vals = [measure_step((t, clean + np.random.default_rng(s).normal(0, noise, t.size)))
                for s in range(20)]
        os_ = np.array([v.overshoot_pct for v in vals])
        print(f"   noise {noise * 1e3:4.0f} mV: overshoot {os_.mean():.3f} ± "
              f"{os_.std(ddof=1) / math.sqrt(os_.size):.3f} % (truth {truth:.3f} %), "
              f"range {os_.min():.2f}-{os_.max():.2f} %")
    est = [measure_step((t, np.round((clean + np.random.default_rng(s).normal(0, 5e-3, t.size))
                                     / 1e-3) * 1e-3)).noise_v for s in range(10)]
    print("   noise with 1 mV codes (truth 5 mV): " + ", ".join(f"{v * 1e3:.2f}" for v in est))


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--draws", type=int, default=300, help="Monte Carlo draws per yield")
    args = ap.parse_args()
    warnings.simplefilter("ignore", RuntimeWarning)   # python-control's high-order polynomials
    case1()
    case2(args.draws, 150e-6, 120.0)
    case2(args.draws, 0.0, 100.0)
    case3()
    case5(args.draws)
    case6()


if __name__ == "__main__":
    main()
