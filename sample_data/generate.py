"""Generate benchfit's sample data from physical models of circuits of our own.

Run ``python sample_data/generate.py`` (optionally ``--out DIR``).  The output is
deterministic: fixed random seeds and fixed number formats, so regenerating
gives byte-identical files.  The script uses numpy and scipy only (not
benchfit), so the files are an independent check on benchfit's readers and
fits.  ``scenarios.json`` holds each scenario's component values, noise and
exact true model (zeros, poles in rad/s, gain k in scipy's zpk sense, delay).

Scenarios
---------
buck_plant.csv
    Control-to-output (duty → output voltage) response of a small voltage-mode
    buck converter: Vin 12 V, PWM ramp 1 V peak-to-peak, L 10 µH with 30 mΩ
    winding resistance, C 100 µF with 20 mΩ ESR, 1 Ω load, plus a 150 ns
    PWM/sampling delay.  10 Hz–1 MHz, 401 log-spaced points.  Noise: 0.1 dB
    and 0.5° (Gaussian, standard deviation) on magnitude and phase.  Written as
    an analyzer might on a European PC: metadata lines, semicolon separator,
    decimal comma, CRLF line ends, ``Frequency (Hz);Gain (dB);Phase (°)``.
ldo_loop.csv
    Loop gain (return ratio) of a 3.3 V linear post-regulator with a PMOS pass
    device and a 22 µF ceramic output capacitor (3 mΩ ESR, 0.8 nH ESL): feedback
    divider 1.2 V/3.3 V, error amplifier 3000 V/V with poles at 300 Hz and
    150 kHz and a compensation zero at 40 kHz, pass device gm 2 S with 100 Ω
    output resistance, 16.5 Ω load (200 mA).  About 37° of phase margin near
    100 kHz: the closed loop peaks by about 4 dB (a resonant loop).  10 Hz–2 MHz,
    301 points.  Noise: 0.2 % on magnitude, 0.3° on phase.  Tab separated,
    frequency in kHz, linear magnitude, phase in degrees, a coherence column.
opamp_buffer.s2p
    Unity-gain op-amp buffer driving 470 pF through its 50 Ω open-loop output
    resistance; op amp A0 = 1e5 with poles at 100 Hz and 30 MHz (10 MHz gain-
    bandwidth).  About 32° of phase margin: S21 (taken as the buffer's voltage
    gain, the fixture's port 2 being a high-impedance probe) peaks by about
    5 dB near 7 MHz.  S11: the 50 Ω input termination in parallel with 5 pF
    input capacitance; S22: the closed-loop output impedance (Ro/(1+A) in
    parallel with the load); S12: 0.05 pF feed-through.  10 kHz–100 MHz, 201
    points, Touchstone v1, ``# MHz S MA R 50``.  Noise 0.05 dB / 0.2° on S21.
buck_zout.csv
    Open-loop output impedance of the same buck (duty fixed, input a stiff
    source): (rL + sL) ∥ R ∥ (ESR + 1/sC).  10 Hz–1 MHz, 301 points, real and
    imaginary parts in ohm, comma separated.  Noise: 0.5 % complex Gaussian.
step_trace.csv
    Scope record of a reference step on the buck as it is now: the same buck
    (with its 150 ns delay, Padé-approximated) closed by an older, weaker Type III
    network (crossover 8 kHz, 92° of boost: about 33° of phase margin) through
    the demo's 10 kΩ / 3.24 kΩ divider.  CH1 the reference (0.80 V → 0.85 V at
    t = 0), CH2 the output, Vout/Vref = (1/H)·T/(1 + T).  2000 samples every
    1 µs from −200 µs (pre-trigger).  Noise 0.5 mV on CH1, 2 mV on CH2.
    benchfit's canonical trace format (time in s).  scenarios.json records the
    ζ and fn of the closed loop's dominant pole pair.
load_step_trace.csv
    Output deviation of the same present board for a 0.5 A → 1 A load step:
    ΔI times the step response of Zcl = Zol/(1 + T) (peak |Zcl| recorded as
    rp_ohm).  2000 samples every 0.5 µs from −100 µs;
    no time column (a 'Sample interval' line instead).  Channels ``Iout (A)``
    (noise 5 mA) and ``Vout AC (mV)`` (noise 0.3 mV).  Semicolon separator,
    decimal comma.
refbuf_aol.csv
    Open-loop gain (differential input to the output at the capacitor) of a
    precision reference buffer for an ADC: op amp A0 = 3e5, 8 MHz gain-
    bandwidth, second pole 25 MHz, an emitter-follower output stage (pole at
    60 MHz, 4 Ω open-loop output resistance) driving a 22 µF ceramic reservoir
    capacitor with 3 mΩ ESR (load pole ≈ 1.8 kHz, ESR zero ≈ 2.4 MHz).  The
    stage is to run at a closed-loop gain of 2.5 (1 V → 2.5 V).  1 Hz–50 MHz,
    361 points.  Noise 0.05 dB / 0.3°.  Comma separated, dB and unwrapped degrees.
refbuf_step_trace.csv
    Scope record of a 10 mV input step (1.00 V → 1.01 V at t = 0) on the same
    reference buffer as it is now: Rf 15 kΩ, Rg 10 kΩ and only a 100 pF lead
    capacitor across Rf, which leaves the loop ringing (closed loop
    Aol/(1 + Aol·β), computed with scipy).  CH1 the input, CH2 the output at the
    capacitor; 2000 samples every 50 ns from −10 µs; noise 0.1 mV / 0.3 mV.
dialects/
    The same scenarios written in other dialects the readers accept: a
    whitespace file with a commented header, kHz, phase in radians and a
    descending sweep; two traces side by side; two traces stacked in blocks;
    UTF-8 with BOM, CRLF and a unit row; a Touchstone one-port of Z parameters.
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

import numpy as np
from scipy import signal

HERE = Path(__file__).resolve().parent
TWO_PI = 2.0 * np.pi


# --------------------------------------------------------------------------------------
# models (polynomials in s, highest power first)
# --------------------------------------------------------------------------------------
def buck_parts(r_load: float = 1.0) -> dict:
    return {"vin_v": 12.0, "v_ramp_v": 1.0, "l_h": 10e-6, "r_l_ohm": 30e-3, "c_f": 100e-6,
            "esr_ohm": 20e-3, "r_load_ohm": r_load, "delay_s": 150e-9}


def buck_plant_tf(p: dict) -> tuple[np.ndarray, np.ndarray]:
    """Duty → vout: (Vin/Vm)·R(1 + s·rc·C) / ((rL + sL)(1 + s(R + rc)C) + R(1 + s·rc·C))."""
    R, rc, C, L, rL = p["r_load_ohm"], p["esr_ohm"], p["c_f"], p["l_h"], p["r_l_ohm"]
    num = (p["vin_v"] / p["v_ramp_v"]) * R * np.array([rc * C, 1.0])
    den = np.polyadd(np.polymul([L, rL], [(R + rc) * C, 1.0]), R * np.array([rc * C, 1.0]))
    return num, den


def buck_zout_tf(p: dict) -> tuple[np.ndarray, np.ndarray]:
    """(rL + sL) ∥ R ∥ (rc + 1/sC), same denominator as the plant."""
    R, rc, C, L, rL = p["r_load_ohm"], p["esr_ohm"], p["c_f"], p["l_h"], p["r_l_ohm"]
    num = np.polymul([L, rL], R * np.array([rc * C, 1.0]))
    den = np.polyadd(np.polymul([L, rL], [(R + rc) * C, 1.0]), R * np.array([rc * C, 1.0]))
    return num, den


def ldo_parts() -> dict:
    return {"beta": 1.2 / 3.3, "a0": 3000.0, "f_amp_pole_hz": 300.0, "f_gate_pole_hz": 150e3,
            "f_comp_zero_hz": 40e3, "gm_s": 2.0, "r_out_pass_ohm": 100.0, "r_load_ohm": 16.5,
            "c_f": 22e-6, "esr_ohm": 3e-3, "esl_h": 0.8e-9}


def ldo_loop_tf(p: dict) -> tuple[np.ndarray, np.ndarray]:
    """T = β·A(s)·gm·Zo, Zo = Ro ∥ RL ∥ (ESR + s·ESL + 1/sC)."""
    wa, wg, wz = (TWO_PI * p[k] for k in ("f_amp_pole_hz", "f_gate_pole_hz", "f_comp_zero_hz"))
    C = p["c_f"]
    P = np.array([p["esl_h"] * C, p["esr_ohm"] * C, 1.0])  # Zc = P / (sC)
    G = 1.0 / p["r_out_pass_ohm"] + 1.0 / p["r_load_ohm"]
    zo_den = np.polyadd(G * P, [C, 0.0])  # Zo = P / (G·P + sC)
    num = p["beta"] * p["a0"] * p["gm_s"] * np.polymul([1.0 / wz, 1.0], P)
    den = np.polymul(np.polymul([1.0 / wa, 1.0], [1.0 / wg, 1.0]), zo_den)
    return num, den


def buffer_parts() -> dict:
    return {"a0": 1e5, "f_pole1_hz": 100.0, "f_pole2_hz": 30e6, "r_out_ohm": 50.0, "c_load_f": 470e-12,
            "c_in_f": 5e-12, "c_feed_f": 0.05e-12, "z0_ohm": 50.0}


def buffer_tf(p: dict) -> tuple[np.ndarray, np.ndarray]:
    """H = A0 / ((1 + s/ω1)(1 + s/ω2)(1 + s·Ro·CL) + A0)."""
    w1, w2 = TWO_PI * p["f_pole1_hz"], TWO_PI * p["f_pole2_hz"]
    den = np.polymul(np.polymul([1.0 / w1, 1.0], [1.0 / w2, 1.0]), [p["r_out_ohm"] * p["c_load_f"], 1.0])
    den = np.polyadd(den, [p["a0"]])
    return np.array([p["a0"]]), den


def zpk_dict(num: np.ndarray, den: np.ndarray, delay_s: float = 0.0) -> dict:
    """Exact zeros/poles (rad/s) and k of num/den, as JSON lists of [re, im]."""
    z, p, k = signal.tf2zpk(num, den)
    pairs = lambda v: [[float(x.real), float(x.imag)] for x in sorted(v, key=lambda c: (abs(c), c.imag))]  # noqa: E731
    return {"zeros": pairs(z), "poles": pairs(p), "k": float(k), "delay_s": float(delay_s)}


def evaluate(num: np.ndarray, den: np.ndarray, f: np.ndarray, delay_s: float = 0.0) -> np.ndarray:
    s = 1j * TWO_PI * f
    return np.polyval(num, s) / np.polyval(den, s) * np.exp(-s * delay_s)


def wrap_deg(h: np.ndarray) -> np.ndarray:
    """Phase in (-180, 180] degrees, as analyzers print it."""
    return np.degrees(np.angle(h))


# --------------------------------------------------------------------------------------
# writers (each a dialect of its own)
# --------------------------------------------------------------------------------------
def dc(x: float, fmt: str) -> str:
    """A number with a decimal comma."""
    return (fmt % x).replace(".", ",")


def write(path: Path, text: str, newline: str = "\n", bom: bool = False) -> None:
    path.parent.mkdir(parents=True, exist_ok=True)
    data = text.replace("\n", newline).encode("utf-8")
    path.write_bytes((b"\xef\xbb\xbf" if bom else b"") + data)


def gen_buck_plant(out: Path, scen: dict) -> None:
    p = buck_parts()
    f = np.logspace(1, 6, 401)
    num, den = buck_plant_tf(p)
    h = evaluate(num, den, f, p["delay_s"])
    rng = np.random.default_rng(20240101)
    mag_db = 20 * np.log10(np.abs(h)) + rng.normal(0.0, 0.1, f.size)
    ph = np.degrees(np.angle(h * np.exp(1j * np.radians(rng.normal(0.0, 0.5, f.size)))))
    lines = ["Sweep export", "Instrument;benchfit sample generator (simulated analyzer)",
             "Measurement;control-to-output, buck converter", "Points;401",
             "IF bandwidth;10 Hz", "", "Frequency (Hz);Gain (dB);Phase (°)"]
    lines += [f"{dc(fi, '%.6g')};{dc(m, '%.3f')};{dc(a, '%.2f')}" for fi, m, a in zip(f, mag_db, ph, strict=True)]
    write(out / "buck_plant.csv", "\n".join(lines) + "\n", newline="\r\n")
    scen["buck_plant.csv"] = {
        "what": "control-to-output of a voltage-mode buck (duty -> Vout)", "quantity": "plant",
        "parts": p, "noise": {"mag_db_std": 0.1, "phase_deg_std": 0.5},
        "freq_hz": [float(f[0]), float(f[-1]), int(f.size)], "truth": zpk_dict(num, den, p["delay_s"]),
        "seed": 20240101}

    # variant: whitespace, commented header, kHz, radians, descending
    rows = [f"{fi / 1e3:.6e}  {m:+.4f}  {np.radians(a):+.5f}" for fi, m, a in zip(f, mag_db, ph, strict=True)][::-1]
    text = ("# buck converter control-to-output (same data as ../buck_plant.csv)\n"
            "# swept from high to low frequency\n"
            "# freq[kHz]  gain[dB]  phase[rad]\n" + "\n".join(rows) + "\n")
    write(out / "dialects" / "buck_plant_descending_rad.txt", text)

    # variant: two loads side by side
    p10 = buck_parts(10.0)
    n10, d10 = buck_plant_tf(p10)
    h10 = evaluate(n10, d10, f, p10["delay_s"])
    rng2 = np.random.default_rng(20240102)
    h10n = h10 * 10 ** (rng2.normal(0, 0.1, f.size) / 20) * np.exp(1j * np.radians(rng2.normal(0, 0.5, f.size)))
    hn = 10 ** (mag_db / 20) * np.exp(1j * np.radians(ph))  # the noisy heavy-load data above
    lines = ["Frequency (Hz),Gain heavy (dB),Phase heavy (deg),Gain light (dB),Phase light (deg)"]
    lines += [f"{fi:.6g},{20 * np.log10(abs(a)):.3f},{np.degrees(np.angle(a)):.2f},"
              f"{20 * np.log10(abs(b)):.3f},{np.degrees(np.angle(b)):.2f}" for fi, a, b in zip(f, hn, h10n, strict=True)]
    write(out / "dialects" / "two_loads.csv", "\n".join(lines) + "\n")
    scen["dialects/two_loads.csv"] = {
        "what": "buck control-to-output at 1 ohm (heavy) and 10 ohm (light) load, side by side",
        "quantity": "plant", "traces": {"heavy": zpk_dict(num, den, p["delay_s"]),
                                        "light": zpk_dict(n10, d10, p10["delay_s"])},
        "parts_light": p10}

    # variant: the same two loads stacked in blocks, real/imaginary, tab separated
    text = ["Stacked export: one block per trace", ""]
    for title, hh in (("Trace: heavy load (1 ohm)", hn), ("Trace: light load (10 ohm)", h10n)):
        text += [title, "Freq/Hz\tRe\tIm"]
        text += [f"{fi:.6g}\t{v.real:.6e}\t{v.imag:.6e}" for fi, v in zip(f, hh, strict=True)]
        text += [""]
    write(out / "dialects" / "stacked_traces.tsv", "\n".join(text))
    scen["dialects/stacked_traces.tsv"] = dict(scen["dialects/two_loads.csv"])


def gen_buck_zout(out: Path, scen: dict) -> None:
    p = buck_parts()
    f = np.logspace(1, 6, 301)
    num, den = buck_zout_tf(p)
    z = evaluate(num, den, f)
    rng = np.random.default_rng(20240103)
    zn = z * (1 + 0.005 * (rng.normal(size=f.size) + 1j * rng.normal(size=f.size)) / np.sqrt(2))
    lines = ["Frequency [Hz],Z real [Ohm],Z imag [Ohm]"]
    lines += [f"{fi:.6e},{v.real:.6e},{v.imag:.6e}" for fi, v in zip(f, zn, strict=True)]
    write(out / "buck_zout.csv", "\n".join(lines) + "\n")
    scen["buck_zout.csv"] = {
        "what": "open-loop output impedance of the buck: (rL + sL) || R || (ESR + 1/sC)",
        "quantity": "impedance", "parts": p, "noise": {"complex_relative_std": 0.005},
        "freq_hz": [float(f[0]), float(f[-1]), int(f.size)], "truth": zpk_dict(num, den), "seed": 20240103}

    # variant: the same impedance as a Touchstone one-port of Z parameters, normalised to 50 ohm
    rows = [f"{fi / 1e3:.6f} {v.real / 50.0:.9e} {v.imag / 50.0:.9e}" for fi, v in zip(f, zn, strict=True)]
    text = ("! buck open-loop output impedance (same data as ../buck_zout.csv)\n"
            "! Z parameters, normalised to R as Touchstone version 1 requires\n"
            "# kHz Z RI R 50\n" + "\n".join(rows) + "\n")
    write(out / "dialects" / "buck_zout.s1p", text)
    scen["dialects/buck_zout.s1p"] = dict(scen["buck_zout.csv"])


def gen_ldo(out: Path, scen: dict) -> None:
    p = ldo_parts()
    f = np.logspace(1, np.log10(2e6), 301)
    num, den = ldo_loop_tf(p)
    t = evaluate(num, den, f)
    rng = np.random.default_rng(20240104)
    mag = np.abs(t) * (1 + rng.normal(0, 0.002, f.size))
    ph = np.degrees(np.angle(t * np.exp(1j * np.radians(rng.normal(0, 0.3, f.size)))))
    coh = np.clip(1 - 0.02 * rng.random(f.size) - 0.05 / (1 + (np.abs(t) - 1) ** 2), 0, 1)
    lines = ["# Loop gain, 3.3 V linear post-regulator, 22 uF ceramic output capacitor",
             "# injection across 10 ohm in the feedback path; T = -B/A",
             "Freq (kHz)\tMagnitude (V/V)\tPhase (deg)\tCoherence"]
    lines += [f"{fi / 1e3:.5e}\t{m:.5e}\t{a:.2f}\t{c:.4f}" for fi, m, a, c in zip(f, mag, ph, coh, strict=True)]
    write(out / "ldo_loop.csv", "\n".join(lines) + "\n")
    cl = t / (1 + t)
    i = int(np.argmin(np.abs(np.abs(t) - 1)))
    scen["ldo_loop.csv"] = {
        "what": "loop gain (return ratio) of a PMOS linear regulator with a 22 uF ceramic capacitor",
        "quantity": "loop", "parts": p, "noise": {"mag_relative_std": 0.002, "phase_deg_std": 0.3},
        "freq_hz": [float(f[0]), float(f[-1]), int(f.size)], "truth": zpk_dict(num, den),
        "approx": {"crossover_hz": float(f[i]), "phase_margin_deg": float(180 + np.degrees(np.angle(t[i]))),
                   "closed_loop_peak_db": float(20 * np.log10(np.abs(cl).max()))},
        "seed": 20240104}

    # variant: UTF-8 with BOM, CRLF, names row + unit row, dB/deg, comma separated
    lines = ["Frequency,Magnitude,Phase", "Hz,dB,deg"]
    lines += [f"{fi:.6g},{20 * np.log10(m):.4f},{a:.2f}" for fi, m, a in zip(f, mag, ph, strict=True)]
    write(out / "dialects" / "ldo_loop_bom_units.csv", "\n".join(lines) + "\n", newline="\r\n", bom=True)
    scen["dialects/ldo_loop_bom_units.csv"] = dict(scen["ldo_loop.csv"])


def gen_buffer(out: Path, scen: dict) -> None:
    p = buffer_parts()
    f = np.logspace(4, 8, 201)
    s = 1j * TWO_PI * f
    num, den = buffer_tf(p)
    s21 = evaluate(num, den, f)
    a_ol = p["a0"] / ((1 + s / (TWO_PI * p["f_pole1_hz"])) * (1 + s / (TWO_PI * p["f_pole2_hz"])))
    z_out = 1 / (1 / (p["r_out_ohm"] / (1 + a_ol)) + s * p["c_load_f"])
    z_in = 1 / (1 / p["z0_ohm"] + s * p["c_in_f"])
    z0 = p["z0_ohm"]
    s11 = (z_in - z0) / (z_in + z0)
    s22 = (z_out - z0) / (z_out + z0)
    s12 = s * p["c_feed_f"] * z0 / 2
    rng = np.random.default_rng(20240105)
    s21n = s21 * 10 ** (rng.normal(0, 0.05, f.size) / 20) * np.exp(1j * np.radians(rng.normal(0, 0.2, f.size)))
    rows = []
    for k in range(f.size):
        vals = [s11[k], s21n[k], s12[k], s22[k]]
        rows.append(f"{f[k] / 1e6:.6f} " + " ".join(f"{abs(v):.6e} {np.degrees(np.angle(v)):.3f}" for v in vals))
    text = ("! Capacitively loaded op-amp buffer (benchfit sample generator)\n"
            "! Unity-gain buffer, 50 ohm open-loop output resistance, 470 pF load\n"
            "# MHz S MA R 50\n"
            "! freq magS11 angS11 magS21 angS21 magS12 angS12 magS22 angS22\n"
            + "\n".join(rows) + "\n")
    write(out / "opamp_buffer.s2p", text)
    scen["opamp_buffer.s2p"] = {
        "what": "unity-gain op-amp buffer into 470 pF; S21 = buffer voltage gain", "quantity": "closed",
        "parts": p, "noise": {"s21_mag_db_std": 0.05, "s21_phase_deg_std": 0.2},
        "freq_hz": [float(f[0]), float(f[-1]), int(f.size)], "truth": zpk_dict(num, den),
        "seed": 20240105}


def refbuf_parts() -> dict:
    return {"a0": 3e5, "gbw_hz": 8e6, "f_pole2_hz": 25e6, "f_follower_hz": 60e6,
            "r_out_ohm": 4.0, "c_load_f": 22e-6, "esr_ohm": 0.003, "closed_loop_gain": 2.5}


def refbuf_aol_tf(p: dict) -> tuple[np.ndarray, np.ndarray]:
    """Aol = A0/((1 + s/ω1)(1 + s/ω2)(1 + s/ωf)) · (ESR + 1/sC)/(Ro + ESR + 1/sC)."""
    w1 = TWO_PI * p["gbw_hz"] / p["a0"]
    den = np.polymul(np.polymul([1 / w1, 1], [1 / (TWO_PI * p["f_pole2_hz"]), 1]),
                     [1 / (TWO_PI * p["f_follower_hz"]), 1])
    c, esr, ro = p["c_load_f"], p["esr_ohm"], p["r_out_ohm"]
    return (p["a0"] * np.array([esr * c, 1.0]),
            np.polymul(den, [(ro + esr) * c, 1.0]))


def gen_refbuf(out: Path, scen: dict) -> None:
    """Open-loop gain of a precision reference buffer (op-amp + emitter follower) into 22 µF."""
    p = refbuf_parts()
    f = np.logspace(0, np.log10(50e6), 361)
    num, den = refbuf_aol_tf(p)
    h = evaluate(num, den, f)
    rng = np.random.default_rng(20240108)
    mag_db = 20 * np.log10(np.abs(h)) + rng.normal(0, 0.05, f.size)
    ph = np.degrees(np.unwrap(np.angle(h))) + rng.normal(0, 0.3, f.size)
    lines = ["# open-loop gain, reference buffer: op-amp + emitter follower into 22 uF (benchfit sample)",
             "# measured in the loop (injection), differential input to output at the capacitor",
             "Frequency (Hz),Gain (dB),Phase (deg)"]
    lines += [f"{fi:.6e},{m:.4f},{a:.3f}" for fi, m, a in zip(f, mag_db, ph, strict=True)]
    write(out / "refbuf_aol.csv", "\n".join(lines) + "\n")
    scen["refbuf_aol.csv"] = {
        "what": "open-loop gain Aol of a reference buffer (op-amp, emitter-follower output stage) "
                "driving a 22 uF reservoir capacitor for an ADC; the stage is to be designed for a "
                "closed-loop gain of 2.5", "quantity": "plant", "parts": p,
        "noise": {"mag_db_std": 0.05, "phase_deg_std": 0.3},
        "freq_hz": [float(f[0]), float(f[-1]), int(f.size)], "truth": zpk_dict(num, den),
        "approx": {"load_pole_hz": 1 / (TWO_PI * (p["r_out_ohm"] + p["esr_ohm"]) * p["c_load_f"]),
                   "esr_zero_hz": 1 / (TWO_PI * p["esr_ohm"] * p["c_load_f"])},
        "seed": 20240108}


# --------------------------------------------------------------------------------------
# the board as it is now: the same buck closed by an older, weaker Type III network
# --------------------------------------------------------------------------------------
#: Divider of the demo's design (10 kΩ over 3.24 kΩ): sensing gain H.
SENSE_H = 3.24e3 / (10e3 + 3.24e3)
#: The present compensator: crossover 8 kHz with 92° of boost (the new design: 20 kHz, 126°).
PRESENT_FC_HZ, PRESENT_BOOST_DEG = 8e3, 92.0


def gen_refbuf_step(out: Path, scen: dict) -> None:
    """Scope record of a 10 mV input step on the reference buffer as it is now (lead network only)."""
    p = refbuf_parts()
    rf, rg, cf = 15e3, 10e3, 100e-12          # the present board: Cf across Rf, no lag
    w = 1e6                                    # polynomials in s/w (time in µs) keep their scale
    num, den = refbuf_aol_tf(p)
    n_a = num * w ** np.arange(len(num) - 1, -1, -1)
    d_a = den * w ** np.arange(len(den) - 1, -1, -1)
    n_b = np.array([rg * rf * cf * w, rg])     # β = Rg(1 + sRfCf)/(Rg(1 + sRfCf) + Rf)
    d_b = np.array([rg * rf * cf * w, rg + rf])
    n, dt, t0 = 2000, 50e-9, -10e-6
    t = t0 + dt * np.arange(n)
    y = closed_step(np.polymul(n_a, d_b), np.polyadd(np.polymul(d_a, d_b), np.polymul(n_a, n_b)),
                    t * w)                     # G = Aol/(1 + Aol·β), time in µs
    v_in0, dv = 1.0, 0.01
    out_v = v_in0 * (1 + rf / rg) + dv * y
    rng = np.random.default_rng(20240109)
    ch1 = np.where(t >= 0, v_in0 + dv, v_in0) + rng.normal(0, 0.1e-3, n)
    ch2 = out_v + rng.normal(0, 0.3e-3, n)
    meta = {"what": "10 mV input step on the reference buffer as it is now (Cf = 100 pF across Rf only)",
            "source": "sample_data/generate.py", "units": {"CH1": "V", "CH2": "V"},
            "channels": {"CH1": "input", "CH2": "output at the 22 uF capacitor"}}
    lines = ["# benchfit trace v1", "# meta: " + json.dumps(meta), "time_s,CH1,CH2"]
    lines += [f"{ti:.7e},{a:.5f},{b:.5f}" for ti, a, b in zip(t, ch1, ch2, strict=True)]
    write(out / "refbuf_step_trace.csv", "\n".join(lines) + "\n")
    scen["refbuf_step_trace.csv"] = {
        "what": "input step on the reference buffer as it is now: CH1 input, CH2 output",
        "channels": {"CH1": "input (V)", "CH2": "output (V)"},
        "parts": {"Rf_ohm": rf, "Rg_ohm": rg, "Cf_f": cf, **p},
        "truth": {"closed_loop": "Aol/(1 + Aol·beta), beta = Rg(1 + sRfCf)/(Rg(1 + sRfCf) + Rf)",
                  "overshoot_fraction": float(y.max() / y[-1] - 1.0), "t_step_s": 0.0},
        "sampling": {"n": n, "dt_s": dt, "t0_s": t0},
        "noise": {"ch1_v_std": 0.1e-3, "ch2_v_std": 0.3e-3}, "seed": 20240109}


def present_compensator(p: dict) -> tuple[np.ndarray, np.ndarray]:
    """C = ωi/s · (1 + s/ωz)² / (1 + s/ωp)², ωz = ωc/√K, ωp = √K·ωc (K factor), |T(jωc)| = 1."""
    k = np.tan(np.radians(PRESENT_BOOST_DEG / 4 + 45.0)) ** 2
    wc = TWO_PI * PRESENT_FC_HZ
    wz, wp = wc / np.sqrt(k), wc * np.sqrt(k)
    num = np.polymul([1 / wz, 1.0], [1 / wz, 1.0])
    den = np.polymul([1.0, 0.0], np.polymul([1 / wp, 1.0], [1 / wp, 1.0]))
    nump, denp = buck_plant_tf(p)
    s = 1j * wc
    t_unit = (np.polyval(nump, s) / np.polyval(denp, s) * np.exp(-s * p["delay_s"]) * SENSE_H
              * np.polyval(num, s) / np.polyval(den, s))
    return num / abs(t_unit), den


def present_loop(p: dict) -> tuple[np.ndarray, np.ndarray]:
    """Loop gain T = P·H·C of the present board, the delay as a second-order Padé approximant."""
    tau = p["delay_s"]
    pade_n = np.array([tau ** 2 / 12, -tau / 2, 1.0])
    pade_d = np.array([tau ** 2 / 12, tau / 2, 1.0])
    nump, denp = buck_plant_tf(p)
    numc, denc = present_compensator(p)
    return (SENSE_H * np.polymul(np.polymul(nump, pade_n), numc),
            np.polymul(np.polymul(denp, pade_d), denc))


def dominant_pair(den_closed: np.ndarray) -> tuple[float, float]:
    """(ζ, fn) of the closed-loop complex pole pair closest to the imaginary axis."""
    r = np.roots(den_closed)
    pair = r[r.imag > 0]
    q = pair[np.argmin(np.abs(pair.real))]
    return float(-q.real / abs(q)), float(abs(q) / TWO_PI)


def closed_step(num: np.ndarray, den: np.ndarray, t: np.ndarray) -> np.ndarray:
    """Unit-step response of num/den at the times t (zero before t = 0)."""
    tt = t[t >= 0]
    _, y = signal.step(signal.lti(num, den), T=tt - tt[0])
    out = np.zeros_like(t)
    out[t >= 0] = y
    return out


def present_board(p: dict) -> dict:
    """Closed-loop figures of the present board: Vout/Vref, Zcl, their dominant pair, the Zcl peak."""
    nt, dt = present_loop(p)
    n, d = nt, np.polyadd(dt, nt)
    numz, denz = buck_zout_tf(p)
    zn, zd = np.polymul(numz, dt), np.polymul(denz, np.polyadd(dt, nt))
    zeta, fn = dominant_pair(np.polyadd(dt, nt))
    f = np.logspace(2, 6, 2000)
    zmag = np.abs(np.polyval(zn, 2j * np.pi * f) / np.polyval(zd, 2j * np.pi * f))
    return {"vout_over_vref": (n / SENSE_H, d), "zcl": (zn, zd), "zeta": zeta, "fn_hz": fn,
            "zcl_peak_ohm": float(zmag.max()), "zcl_peak_hz": float(f[np.argmax(zmag)])}


def gen_step(out: Path, scen: dict) -> None:
    p = buck_parts()
    pb = present_board(p)
    n, dt, t0 = 2000, 1e-6, -200e-6
    t = t0 + dt * np.arange(n)
    ref0, ref1 = 0.80, 0.85
    gain = 1.0 / SENSE_H
    y = ref0 * gain + (ref1 - ref0) * closed_step(*pb["vout_over_vref"], t)
    rng = np.random.default_rng(20240106)
    ch1 = np.where(t >= 0, ref1, ref0) + rng.normal(0, 0.5e-3, n)
    ch2 = y + rng.normal(0, 2e-3, n)
    # benchfit's own canonical trace format: time in s, one column per channel in V
    meta = {"what": "reference step on the buck with its present compensation",
            "source": "sample_data/generate.py",
            "units": {"CH1": "V", "CH2": "V"}, "channels": {"CH1": "reference", "CH2": "output"}}
    lines = ["# benchfit trace v1", "# meta: " + json.dumps(meta), "time_s,CH1,CH2"]
    lines += [f"{ti:.7e},{a:.5f},{b:.5f}" for ti, a, b in zip(t, ch1, ch2, strict=True)]
    write(out / "step_trace.csv", "\n".join(lines) + "\n")
    step = (ref1 - ref0) * gain
    scen["step_trace.csv"] = {
        "what": "reference step on the buck with its present compensation (an older Type III network: "
                f"{PRESENT_FC_HZ:g} Hz crossover, {PRESENT_BOOST_DEG:g}° boost): CH1 reference, CH2 output",
        "channels": {"CH1": "reference (V)", "CH2": "output (V)"},
        "truth": {"zeta": pb["zeta"], "fn_hz": pb["fn_hz"],
                  "f_ring_hz": pb["fn_hz"] * float(np.sqrt(1 - pb["zeta"] ** 2)), "t_step_s": 0.0,
                  "ch1_before_v": ref0, "ch1_after_v": ref1, "ch2_before_v": ref0 * gain,
                  "ch2_after_v": ref1 * gain, "overshoot_fraction": float((y.max() - ref1 * gain) / step),
                  "closed_loop": "Vout/Vref = (1/H)·T/(1 + T), T = buck · H · present compensator",
                  "dominant_pair": "zeta and fn of the closed-loop pole pair nearest the imaginary axis"},
        "present_compensator": {"crossover_hz": PRESENT_FC_HZ, "boost_deg": PRESENT_BOOST_DEG,
                                "sensing_gain": SENSE_H},
        "sampling": {"n": n, "dt_s": dt, "t0_s": t0},
        "noise": {"ch1_v_std": 0.5e-3, "ch2_v_std": 2e-3}, "seed": 20240106}


def gen_load_step(out: Path, scen: dict) -> None:
    p = buck_parts()
    pb = present_board(p)
    di = 0.5
    n, dt, t0 = 2000, 0.5e-6, -100e-6
    t = t0 + dt * np.arange(n)
    v = -di * closed_step(*pb["zcl"], t)
    i_load = np.where(t >= 0, 0.5 + di, 0.5)
    rng = np.random.default_rng(20240107)
    i_n = i_load + rng.normal(0, 5e-3, n)
    v_n = v + rng.normal(0, 0.3e-3, n)
    lines = ["Scope export (benchfit sample generator)", "Sample interval;500 ns", "Start time;-100 us",
             f"Points;{n}", "", "Iout (A);Vout AC (mV)"]
    lines += [f"{dc(a, '%.4f')};{dc(b * 1e3, '%.3f')}" for a, b in zip(i_n, v_n, strict=True)]
    write(out / "load_step_trace.csv", "\n".join(lines) + "\n")
    scen["load_step_trace.csv"] = {
        "what": "output deviation of the buck with its present compensation for a 0.5 A -> 1 A load step",
        "channels": {"Iout": "load current (A)", "Vout AC": "output deviation (V, file in mV)"},
        "truth": {"zcl": "Zol/(1 + T), T = buck · H · present compensator (as step_trace.csv)",
                  "zcl_model": zpk_dict(*pb["zcl"]),
                  "rp_ohm": pb["zcl_peak_ohm"], "zcl_peak_hz": pb["zcl_peak_hz"], "fn_hz": pb["fn_hz"],
                  "zeta": pb["zeta"], "delta_i_a": di, "t_step_s": 0.0,
                  "peak_deviation_v": float(v.min())},
        "sampling": {"n": n, "dt_s": dt, "t0_s": t0},
        "noise": {"iout_a_std": 5e-3, "vout_v_std": 0.3e-3}, "seed": 20240107}


def generate(out: Path = HERE) -> list[Path]:
    """Write every sample file under ``out``; return the paths written."""
    out = Path(out)
    scen: dict = {}
    for gen in (gen_buck_plant, gen_buck_zout, gen_ldo, gen_buffer, gen_step, gen_load_step,
                gen_refbuf, gen_refbuf_step):
        gen(out, scen)
    doc = {"about": "true models and settings of benchfit's sample data; written by generate.py",
           "units": "zeros and poles in rad/s ([re, im]); k in scipy's zpk convention; SI units",
           "scenarios": scen}
    write(out / "scenarios.json", json.dumps(doc, indent=2, sort_keys=True) + "\n")
    return sorted(p for p in out.rglob("*") if p.is_file() and p.suffix != ".py")


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--out", type=Path, default=HERE, help="folder to write into (default: this one)")
    args = ap.parse_args(argv)
    for p in generate(args.out):
        print(p)
    return 0


if __name__ == "__main__":
    sys.exit(main())
