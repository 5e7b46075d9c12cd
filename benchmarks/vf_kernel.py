"""benchfit's vector-fitting kernel beside scikit-rf's VectorFitting.vector_fit, at the same order.

The kernel alone, not the whole fit: one ``benchfit.fitting.order.attempt`` at
the order asked, without delay, on every point of the band (the weights,
direct/proportional terms and frequency scale that ``fit()`` would use, from
``benchfit.fitting.problem.prepare``), against scikit-rf's relocation loop
with the same number of real and complex starting poles (log-spaced, constant
term fitted).  Cases: the fixed cases of benchmarks/fit_vs_reference.py.

Printed per case: both CPU times (median of ``--repeat`` after one untimed
warm-up, one BLAS thread, both in this process), both iteration counts, both
rms relative errors (|H_model/H − 1|, against the noiseless truth for our
plants and against the data for scikit-rf's files) and the speed ratio
(scikit-rf time / benchfit time).

    python benchmarks/vf_kernel.py [--repeat 20] [--seeds 2]

Prints figures only; nothing is asserted (timings are not tests).
"""

from __future__ import annotations

import os

for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ[_var] = "1"  # pin BLAS before numpy loads

import argparse  # noqa: E402
import sys  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402

sys.path.insert(0, str(Path(__file__).resolve().parent))
from fit_vs_reference import Reference, _rms_rel, _time, fixed_cases  # noqa: E402

from benchfit.fitting.order import attempt  # noqa: E402
from benchfit.fitting.problem import prepare  # noqa: E402


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--repeat", type=int, default=20, help="timing repeats (median reported)")
    ap.add_argument("--seeds", type=int, default=2, help="noisy seeds of the converter plant")
    args = ap.parse_args()
    print(f"one BLAS thread; CPU ms, median of {args.repeat}; scikit-rf "
          f"{__import__('skrf').__version__}")
    print(f"   {'case':27} {'N':>2} {'pts':>4} {'skrf ms':>8} {'bf ms':>7} {'speed':>6} "
          f"{'skrf it':>7} {'bf it':>5} {'skrf err':>9} {'bf err':>9}")
    ratios = []
    for label, data, exact, n, n_real, n_cmplx in fixed_cases(args.seeds):
        ref = Reference(data, n_real, n_cmplx)
        t_ref, _ = _time(ref.run, args.repeat)
        ctx = prepare(data, n, "none", None, None, "relative", 0, None, None).ctx
        t_bf, att = _time(lambda ctx=ctx, n=n: attempt(ctx, n, 0.0), args.repeat)
        want = data.response if exact is None else exact
        e_ref = _rms_rel(ref.response(), want)
        e_bf = _rms_rel(att.vf.at(ctx.s), want)
        ratios.append(t_ref / t_bf)
        print(f"   {label:27} {n:2d} {data.freq_hz.shape[0]:4d} {t_ref * 1e3:8.2f} "
              f"{t_bf * 1e3:7.2f} {t_ref / t_bf:6.2f} {ref.iterations:7d} "
              f"{att.vf.iterations:5d} {e_ref:9.2e} {e_bf:9.2e}")
    print(f"   speed ratio: median {np.median(ratios):.2f}, lowest {min(ratios):.2f}")


if __name__ == "__main__":
    main()
