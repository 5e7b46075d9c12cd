"""How fast the readers are: 100k-line sweeps in several dialects, a Touchstone file, a scope trace.

Prints one line per case: lines, best of 5 wall times, lines per second.
Run: .venv/bin/python benchmarks/read_sweep.py
"""

from __future__ import annotations

import tempfile
from pathlib import Path

import numpy as np
from _timing import best_wall

from benchfit.data import read_sweep, read_trace

N = 100_000


def _sweep_text(sep: str, decimal: str, form: str) -> str:
    f = np.logspace(0, 7, N)
    h = 1 / (1 + 1j * f / 1e3) * np.exp(-2j * np.pi * f * 1e-7)
    if form == "db_deg":
        head = sep.join(["Frequency (Hz)", "Gain (dB)", "Phase (deg)"])
        cols = (f, 20 * np.log10(np.abs(h)), np.degrees(np.angle(h)))
    else:
        head = sep.join(["Frequency (Hz)", "Re", "Im"])
        cols = (f, h.real, h.imag)
    body = "\n".join(sep.join(f"{v:.6e}" for v in row) for row in zip(*cols, strict=True))
    if decimal == ",":
        body = body.replace(".", ",")
    return f"Exported sweep\nPoints: {N}\n\n" + head + "\n" + body + "\n"


def _touchstone_text() -> str:
    f = np.logspace(0, 7, N)
    rows = "\n".join(f"{fi:.6e} 0.1 10 0.9 -20 0.01 5 0.2 -30" for fi in f)
    return "# Hz S MA R 50\n" + rows + "\n"


def _trace_text() -> str:
    t = -1e-4 + 1e-8 * np.arange(N)
    y = np.sin(2 * np.pi * 1e4 * t)
    return "Sample Interval,1e-08\nTime (us),CH1 (V),CH2 (V)\n" + "\n".join(
        f"{ti * 1e6:.3f},{a:.5f},{-a:.5f}" for ti, a in zip(t, y, strict=True)) + "\n"


def main() -> None:
    cases = [
        ("comma . dB/deg", "a.csv", _sweep_text(",", ".", "db_deg"), read_sweep),
        ("semicolon , re/im", "b.csv", _sweep_text(";", ",", "re_im"), read_sweep),
        ("tab . dB/deg", "c.tsv", _sweep_text("\t", ".", "db_deg"), read_sweep),
        ("whitespace . re/im", "d.txt", _sweep_text(" ", ".", "re_im"), read_sweep),
        ("touchstone s2p MA", "e.s2p", _touchstone_text(), read_sweep),
        ("scope trace 2 ch", "f.csv", _trace_text(), read_trace),
    ]
    with tempfile.TemporaryDirectory() as tmp:
        print(f"{'case':<22} {'lines':>8} {'best s':>8} {'lines/s':>10}")
        for name, fname, text, reader in cases:
            p = Path(tmp) / fname
            p.write_text(text)
            n = text.count("\n")
            dt = best_wall(lambda p=p, reader=reader: reader(p))
            print(f"{name:<22} {n:>8} {dt:>8.3f} {n / dt:>10.0f}")


if __name__ == "__main__":
    main()
