"""How long the CLI takes to answer before any work: `--help`, a command's `--help`, `inspect`.

Each case runs in a fresh interpreter (best of 5 wall times) beside `python -c pass`, the
interpreter's own start-up, and prints the ratio and how many modules were imported.
Run: .venv/bin/python benchmarks/startup.py
"""

from __future__ import annotations

import subprocess
import sys
import time
from pathlib import Path

REPEAT = 5
ROOT = Path(__file__).resolve().parents[1]
SWEEP = ROOT / "sample_data" / "buck_plant.csv"

# prints the number of modules loaded after the command ran (SystemExit from --help included)
_COUNT = ("import sys\nfrom benchfit.cli import main\ntry:\n    main({argv!r})\nexcept SystemExit:\n"
          "    pass\nprint('modules', len(sys.modules), file=sys.stderr)")


def _best(argv: list[str]) -> float:
    best = float("inf")
    for _ in range(REPEAT):
        t0 = time.perf_counter()
        subprocess.run(argv, capture_output=True, check=False)
        best = min(best, time.perf_counter() - t0)
    return best


def _modules(args: list[str]) -> int:
    out = subprocess.run([sys.executable, "-c", _COUNT.format(argv=args)], capture_output=True,
                         text=True, check=False)
    return int(out.stderr.strip().splitlines()[-1].split()[-1])


def main() -> None:
    base = _best([sys.executable, "-c", "pass"])
    print(f"{'python -c pass':<32} {base * 1e3:7.1f} ms   1.0x")
    cases = [["--help"], ["fit", "--help"], ["batch", "--help"], ["report", "--help"],
             ["inspect", str(SWEEP)]]
    for args in cases:
        t = _best([sys.executable, "-m", "benchfit", *args])
        label = "benchfit " + " ".join(a if a != str(SWEEP) else SWEEP.name for a in args)
        print(f"{label:<32} {t * 1e3:7.1f} ms {t / base:5.1f}x  ({_modules(args)} modules)")


if __name__ == "__main__":
    main()
