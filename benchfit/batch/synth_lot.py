"""A generated production lot: converter-like units with part-to-part spread, for tests,
benchmarks and trying ``benchfit batch`` without hardware.

Each unit is a small synchronous buck converter (our own scenario: 12 V in,
4.7 µH, 100 µF with ESR, 1 Ω load, 500 kHz switching) whose inductance,
capacitance, ESR, DCR, load and modulator gain vary unit to unit.  Its
control-to-output response (averaged model with the ESR zero and the
parasitic damping) times a sample-and-hold delay of half a switching period
is written as a canonical sweep with measurement noise.  A "loop" lot
multiplies in the fixed compensator and divider of :func:`lot_design`.
Every number comes from seeded generators, so a lot is the same on every run.
"""

from __future__ import annotations

import os
from pathlib import Path
from typing import Any

import numpy as np
from scipy import signal

from benchfit.data import FrequencyResponse, write_sweep_csv
from benchfit.fileio import encode_complex
from benchfit.fitting.model import PlantModel
from benchfit.provenance import Provenance

#: Nominal parts and the unit-to-unit spread (1 sigma, as a fraction) of each.
NOMINAL = {"vin_v": 12.0, "vramp_v": 1.0, "l_h": 4.7e-6, "c_f": 100e-6, "esr_ohm": 0.020,
           "dcr_ohm": 0.015, "load_ohm": 1.0, "fsw_hz": 500e3}
SPREAD = {"vin_v": 0.0, "vramp_v": 0.03, "l_h": 0.07, "c_f": 0.08, "esr_ohm": 0.15,
          "dcr_ohm": 0.10, "load_ohm": 0.05, "fsw_hz": 0.0}
SENSING_GAIN = 0.6 / 3.3  # divider from a 3.3 V output to a 0.6 V reference


def buck_plant(p: dict[str, float]) -> PlantModel:
    """Control-to-output model of a buck with ESR, DCR and a half-period sampling delay.

    Averaged small-signal model: with load R, inductor L (series r_L) and output
    capacitor C (series r_C),

        G(s) = Vin/Vramp · R/(R + r_L) · (1 + s·C·r_C)
               / (1 + s·[L/(R + r_L) + C·(r_C + R·r_L/(R + r_L))] + s²·L·C·(R + r_C)/(R + r_L))

    Parameters
    ----------
    p
        Part values with the keys of :data:`NOMINAL` (SI units).
    """
    r, rl, rc, l_h, c_f = p["load_ohm"], p["dcr_ohm"], p["esr_ohm"], p["l_h"], p["c_f"]
    g0 = p["vin_v"] / p["vramp_v"] * r / (r + rl)
    num = g0 * np.array([c_f * rc, 1.0])
    den = np.array([l_h * c_f * (r + rc) / (r + rl), l_h / (r + rl) + c_f * (rc + r * rl / (r + rl)), 1.0])
    z, pl, k = signal.tf2zpk(num, den)
    return PlantModel(zeros=z, poles=pl, k=k, delay_s=0.5 / p["fsw_hz"],
                      provenance=Provenance(step="synth_buck", settings=dict(p)))


def lot_compensator() -> PlantModel:
    """The lot's fixed compensator: an integrator, two zeros near the LC corner, two poles
    near the ESR zero and above; gain set for a 25 kHz crossover of the nominal unit."""
    f0 = 1.0 / (2 * np.pi * np.sqrt(NOMINAL["l_h"] * NOMINAL["c_f"]))
    fz, fp1, fp2 = 0.8 * f0, 1.0 / (2 * np.pi * NOMINAL["c_f"] * NOMINAL["esr_ohm"]), 250e3
    zeros = -2 * np.pi * np.array([fz, fz])
    poles = np.array([0.0, -2 * np.pi * fp1, -2 * np.pi * fp2])
    shape = PlantModel(zeros=zeros, poles=poles, k=1.0)
    t = buck_plant(NOMINAL).cascade(shape).response(np.array([25e3]))[0] * SENSING_GAIN
    return PlantModel(zeros=zeros, poles=poles, k=1.0 / abs(t),
                      provenance=Provenance(step="synth_compensator"))


def lot_design() -> dict[str, Any]:
    """The design file (plain JSON data) of the lot: snapped compensator and sensing gain."""
    c = lot_compensator()
    zpk = {"zeros": encode_complex(c.zeros), "poles": encode_complex(c.poles), "k": c.k}
    return {"kind": "design", "compensator": {"ideal": zpk, "snapped": zpk},
            "sensing": {"gain": SENSING_GAIN}, "provenance": c.provenance.to_dict()}


def unit_parts(seed: int, index: int) -> dict[str, float]:
    """Part values of unit ``index`` of the lot seeded ``seed`` (normal spread, clipped at 3 sigma)."""
    rng = np.random.default_rng([seed, index])
    return {k: v * (1.0 + SPREAD[k] * float(np.clip(rng.standard_normal(), -3, 3)))
            for k, v in NOMINAL.items()}


def unit_sweep(seed: int, index: int, *, quantity: str = "plant", points: int = 401,
               f_min_hz: float = 100.0, f_max_hz: float = 300e3,
               noise: float = 0.004) -> FrequencyResponse:
    """One unit's measured sweep.

    Parameters
    ----------
    seed, index
        Which lot and which unit in it.
    quantity
        ``"plant"`` (control-to-output) or ``"loop"`` (times compensator and divider).
    points, f_min_hz, f_max_hz
        Log-spaced frequency grid.
    noise
        Relative complex noise per point (1 sigma).
    """
    parts = unit_parts(seed, index)
    model = buck_plant(parts)
    if quantity == "loop":
        model = model.cascade(lot_compensator()).cascade(PlantModel([], [], SENSING_GAIN))
    elif quantity != "plant":
        raise ValueError(f"quantity {quantity!r}; expected plant or loop")
    f = np.geomspace(f_min_hz, f_max_hz, points)
    h = model.response(f)
    rng = np.random.default_rng([seed, index, 1])
    h = h * (1.0 + noise * (rng.standard_normal(points) + 1j * rng.standard_normal(points)))
    return FrequencyResponse(
        freq_hz=f, response=h, quantity=quantity,
        meta={"serial": f"SN{seed:02d}-{index:05d}"},
        provenance=Provenance(step="synth_lot", settings={"seed": seed, "index": index, **parts}))


def make_lot(folder: str | os.PathLike, n: int, *, seed: int = 1, quantity: str = "plant",
             points: int = 401, start: int = 0) -> list[Path]:
    """Write units ``start .. start+n-1`` of lot ``seed`` as canonical sweeps in ``folder``.

    Returns
    -------
    list of Path
        The files written (``unit_00000.csv`` ...).
    """
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    out = []
    for i in range(start, start + n):
        out.append(write_sweep_csv(unit_sweep(seed, i, quantity=quantity, points=points),
                                   folder / f"unit_{i:05d}.csv"))
    return out


def main(argv: list[str] | None = None) -> int:
    """``python -m benchfit.batch.synth_lot FOLDER N``: write a lot and its design.json."""
    import argparse

    from benchfit.fileio import write_json_atomic

    ap = argparse.ArgumentParser(prog="python -m benchfit.batch.synth_lot",
                                 description="Write a generated lot of converter sweeps and design.json.")
    ap.add_argument("folder")
    ap.add_argument("n", type=int)
    ap.add_argument("--quantity", choices=("plant", "loop"), default="plant")
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--points", type=int, default=401)
    a = ap.parse_args(argv)
    files = make_lot(Path(a.folder) / "sweeps", a.n, seed=a.seed, quantity=a.quantity, points=a.points)
    write_json_atomic(Path(a.folder) / "design.json", lot_design())
    print(f"wrote {len(files)} {a.quantity} sweeps to {Path(a.folder) / 'sweeps'} "
          f"and {Path(a.folder) / 'design.json'}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
