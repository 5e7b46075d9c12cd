"""Speed and accuracy figures for the margins and the time-response predictions.

* ``margins_batch`` on 10 000 Monte Carlo rows of a 400-point loop (the tolerance
  spread's inner loop), against ``margins_from_data`` row by row.
* ``margins_of_model`` on a few loops: points used after refinement and time.
* ``reference_step`` with an exact delay: time, steps, and the error against the
  exact series solution of K·e^(-sτ)/s (method of steps) as the step count grows.

    python benchmarks/margins_speed.py

Prints figures only; nothing is asserted (timings are not tests).
"""

from __future__ import annotations

import math
import time

import numpy as np

from benchfit.fitting.model import PlantModel
from benchfit.loop.margins import margins_batch, margins_from_data, margins_of_model
from benchfit.loop.timeresponse import reference_step


def resonant_loop() -> PlantModel:
    # integrator loop crossing near 3 kHz with a lightly damped pair at 30 kHz (ζ = 0.05)
    wn, z = 2 * np.pi * 30e3, 0.05
    pair = [wn * (-z + 1j * math.sqrt(1 - z * z)), wn * (-z - 1j * math.sqrt(1 - z * z))]
    return PlantModel([], [0.0, *pair], 2 * np.pi * 3e3 * wn**2)


def bench_batch(rows: int = 10_000, points: int = 400) -> None:
    rng = np.random.default_rng(1)
    f = np.logspace(1, 6, points)
    base = resonant_loop().response(f)
    T = base[None, :] * (1 + 0.2 * rng.standard_normal((rows, 1))) \
        * np.exp(1j * np.radians(5) * rng.standard_normal((rows, 1)))
    margins_batch(f, T[:10])                          # warm-up
    t0 = time.perf_counter()
    out = margins_batch(f, T)
    dt = time.perf_counter() - t0
    t0 = time.perf_counter()
    for i in range(200):
        margins_from_data(f, T[i])
    per_row = (time.perf_counter() - t0) / 200
    pm = out["pm_deg"]
    print(f"margins_batch      {rows} rows x {points} points: {dt * 1e3:8.1f} ms "
          f"({dt / rows * 1e6:.2f} us/row); one by one: {per_row * 1e3:.2f} ms/row")
    print(f"                   PM 5/50/95 %: {np.nanpercentile(pm, [5, 50, 95]).round(2)} deg, "
          f"stable {out['stable'].mean() * 100:.1f} %")


def notch_loop() -> PlantModel:
    # integrator crossing at 10 kHz with a notch at 1 kHz that dips below 0 dB
    wz = 2 * np.pi * 1e3
    zeros = [wz * (-0.01 + 1j * math.sqrt(1 - 1e-4)), wz * (-0.01 - 1j * math.sqrt(1 - 1e-4))]
    return PlantModel(zeros, [0.0, -wz, -wz], 2 * np.pi * 1e4)


def bench_models() -> None:
    loops = {
        "integrator + resonance": resonant_loop(),
        "delayed integrator": PlantModel([], [0.0], 2 * np.pi * 1e3, delay_s=50e-6),
        "integrator with a notch": notch_loop(),
    }
    for name, model in loops.items():
        t0 = time.perf_counter()
        m = margins_of_model(model)
        dt = time.perf_counter() - t0
        print(f"margins_of_model   {name:24s} {dt * 1e3:7.1f} ms, {m.provenance.settings['points']:6d} "
              f"points, PM {m.phase_margin_deg:7.2f} deg at {m.crossover_hz:.4g} Hz, "
              f"{len(m.crossings)} crossings")


def bench_delay_step() -> None:
    K, tau = 1.0, 0.3
    model = PlantModel([], [0.0], K, delay_s=tau)
    for steps in (1000, 4000, 16000, 64000):
        t0 = time.perf_counter()
        r = reference_step(model, steps=steps, t_end_s=12.0)
        dt = time.perf_counter() - t0
        t = r.time_s
        exact = np.zeros_like(t)
        for n in range(int(t[-1] / tau) + 1):
            a = np.clip(t - (n + 1) * tau, 0, None)
            exact += (-1) ** n * K ** (n + 1) * a ** (n + 1) / math.factorial(n + 1)
        err = np.max(np.abs(r.value - exact))
        print(f"reference_step     K e^-sT/s, {len(t) - 1:6d} steps: {dt * 1e3:7.1f} ms, "
              f"max error vs exact series {err:.2e}")


def bench_openloop_screen(repeats: int = 20) -> None:
    """The open-loop RHP screen ``margins LOOP.csv`` adds for a stable sweep (no fit runs)."""
    from benchfit.data import FrequencyResponse
    from benchfit.loop.openloop import check_open_loop

    f = np.logspace(1, 5, 401)
    resp = FrequencyResponse(freq_hz=f, response=resonant_loop().response(f), quantity="loop")
    t0 = time.perf_counter()
    for _ in range(repeats):
        m = margins_from_data(f, resp.response)
    t_ref = (time.perf_counter() - t0) / repeats
    t0 = time.perf_counter()
    for _ in range(repeats):
        check_open_loop(resp, m)
    t_scr = (time.perf_counter() - t0) / repeats
    print(f"open-loop screen   401 points: margins_from_data {t_ref * 1e3:6.1f} ms, screen "
          f"{t_scr * 1e3:6.1f} ms, ratio {t_scr / t_ref:.2f} (margins_batch does not run it)")


if __name__ == "__main__":
    bench_openloop_screen()
    bench_batch()
    bench_models()
    bench_delay_step()
