"""Where numpy's conversion of a clean block stops paying against pandas' C parser.

Converts a three-column sweep block of 1k, 10k, 100k and 300k rows both ways (best of 5),
measures pandas' import in a fresh interpreter, and prints the cells at which the two break
even for one file read by a fresh process (the figure behind
``benchfit.data.rowparse.PANDAS_MIN_CELLS``).
Run: OPENBLAS_NUM_THREADS=1 .venv/bin/python benchmarks/row_parsers.py
"""

from __future__ import annotations

import subprocess
import sys

import numpy as np
from _timing import best_wall

from benchfit.data import rowparse
from benchfit.data.dialect import sniff

HEAD = "Frequency (Hz),Gain (dB),Phase (deg)"


def main() -> None:
    t_pd_import = (best_wall(lambda: subprocess.run([sys.executable, "-c", "import pandas"], check=True), 3)
                   - best_wall(lambda: subprocess.run([sys.executable, "-c", "pass"], check=True), 3))
    print(f"pandas import (fresh interpreter, less `python -c pass`)  {t_pd_import * 1e3:7.1f} ms")
    per_cell = []
    for n in (1_000, 10_000, 100_000, 300_000):
        f = np.logspace(0, 7, n)
        texts = [f"{a:.6e},{-10 * np.log10(1 + (a / 1e3) ** 2):.6e},{-np.degrees(np.arctan(a / 1e3)):.6e}"
                 for a in f]
        d = sniff([HEAD, *texts[:20]], "bench")
        saved = rowparse.PANDAS_MIN_CELLS
        try:
            rowparse.PANDAS_MIN_CELLS = 10 ** 12
            t_np = best_wall(lambda texts=texts, d=d: rowparse.fast_rows(texts, d, 3))
            rowparse.PANDAS_MIN_CELLS = 0
            t_pd = best_wall(lambda texts=texts, d=d: rowparse.fast_rows(texts, d, 3))
        finally:
            rowparse.PANDAS_MIN_CELLS = saved
        per_cell.append((t_np - t_pd) / (3 * n))
        print(f"{n:>7} rows  numpy {t_np * 1e3:8.2f} ms  pandas {t_pd * 1e3:8.2f} ms  "
              f"ratio numpy/pandas {t_np / t_pd:5.2f}")
    slope = float(np.median(per_cell))
    print(f"numpy slower by {slope * 1e6:.2f} µs a cell: break-even for one file in a fresh process "
          f"near {t_pd_import / slope:,.0f} cells (PANDAS_MIN_CELLS = {rowparse.PANDAS_MIN_CELLS:,})")


if __name__ == "__main__":
    main()
