"""benchfit's fit side by side with scikit-rf's VectorFitting (the reference library).

Same data, same order, one BLAS thread, one process.  Cases:

1. noiseless 8th-order converter-like plant (1601 log points, 10 Hz..10 MHz):
   fit time (VF + lmfit refinement for benchfit), rms relative error, worst
   relative pole error, and the speed ratio;
2. the same plant with 0.1 dB / 0.5 deg Gaussian noise per point, a few seeds:
   whether each converges, its residual against the noise floor, its worst
   pole-frequency error;
3. the plant with a 150 ns delay: order needed by each, delay found;
4. benchfit's automatic order + delay + refinement time, and the order it
   picks for the data and for the data divided by 1000 (scale invariance).

    python benchmarks/fit_vs_reference.py [--repeat 20] [--seeds 5]

Prints figures only; nothing is asserted (timings are not tests).
"""

from __future__ import annotations

import os

for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ[_var] = "1"  # pin BLAS before numpy loads

import argparse  # noqa: E402
import time  # noqa: E402
import warnings  # noqa: E402

import numpy as np  # noqa: E402

from benchfit.fitting import fit  # noqa: E402
from benchfit.fitting.synthetic import converter_plant, sweep  # noqa: E402

_DB = 20 / np.log(10)


def _pole_freq_error(got, want) -> float:
    """Worst relative error of pole frequencies |p|, matched by sorting (inf if counts differ)."""
    got = np.sort(np.abs(np.asarray(got)))
    want = np.sort(np.abs(np.asarray(want)))
    if got.shape != want.shape:
        return float("inf")
    return float(np.max(np.abs(got - want) / want))


def _pole_error(got, want) -> float:
    """Worst relative error of complex poles, matched by sorting."""
    got, want = np.sort_complex(np.asarray(got)), np.sort_complex(np.asarray(want))
    if got.shape != want.shape:
        return float("inf")
    return float(np.max(np.abs(got - want) / np.abs(want)))


def _time(fn, repeat: int) -> tuple[float, object]:
    out = fn()  # warm-up (imports, caches)
    t = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        out = fn()
        t.append(time.perf_counter() - t0)
    return float(np.median(t)), out


class Reference:
    """scikit-rf VectorFitting on one response, at a given number of real/complex poles."""

    def __init__(self, resp, n_real: int, n_cmplx: int):
        import skrf
        from skrf.vectorFitting import VectorFitting

        self.f = resp.freq_hz
        nw = skrf.Network(frequency=skrf.Frequency.from_f(self.f, unit="hz"),
                          s=resp.response.reshape(-1, 1, 1))
        self.vf = VectorFitting(nw)
        self.n_real, self.n_cmplx = n_real, n_cmplx

    def run(self):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            self.vf.vector_fit(n_poles_real=self.n_real, n_poles_cmplx=self.n_cmplx,
                               init_pole_spacing="log", fit_constant=True)
        return self

    @property
    def poles(self):
        p = self.vf.poles
        return np.concatenate([p, np.conj(p[p.imag != 0])])

    def response(self):
        return self.vf.get_model_response(0, 0, self.f)

    @property
    def iterations(self) -> int:
        return len(self.vf.d_res_history)


def _rms_rel(model_h, h) -> float:
    return float(np.sqrt(np.mean(np.abs(model_h / h - 1) ** 2)))


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--repeat", type=int, default=20, help="timing repeats (median reported)")
    ap.add_argument("--seeds", type=int, default=5, help="noisy seeds for case 2")
    args = ap.parse_args()
    truth = converter_plant()
    clean = sweep(truth)
    h = clean.response
    print(f"plant: 8 poles, 2 zeros, {len(clean)} points, {clean.f_min_hz:g}..{clean.f_max_hz:g} Hz, "
          f"gain span {np.ptp(clean.mag_db):.0f} dB")

    # 1. noiseless, same order
    print("\n1. noiseless, order 8")
    ref = Reference(clean, 2, 3)
    t_ref, _ = _time(ref.run, args.repeat)
    t_bf, res = _time(lambda: fit(clean, order=8, delay="none"), args.repeat)
    print(f"   {'':12} {'time ms':>9} {'rms rel err':>12} {'pole err':>10} {'iterations':>10}")
    print(f"   {'scikit-rf':12} {t_ref * 1e3:9.2f} {_rms_rel(ref.response(), h):12.2e} "
          f"{_pole_error(ref.poles, truth.poles):10.2e} {ref.iterations:10d}")
    print(f"   {'benchfit':12} {t_bf * 1e3:9.2f} {_rms_rel(res.response(clean.freq_hz), h):12.2e} "
          f"{_pole_error(res.model.poles, truth.poles):10.2e} {res.stats['iterations']:10d}"
          f"   (rms {res.stats['rms_db']:.1e} dB)")
    print(f"   speed ratio scikit-rf / benchfit: {t_ref / t_bf:.2f}x")

    # 2. noisy, same order
    print("\n2. 0.1 dB / 0.5 deg noise, order 8 (error of the model against the noiseless truth)")
    print(f"   {'seed':>4} {'who':10} {'time ms':>9} {'rms rel err':>12} {'pole f err':>10} "
          f"{'iter':>5} {'resid/floor':>11}")
    for seed in range(args.seeds):
        noisy = sweep(truth, noise_db=0.1, noise_deg=0.5, rng=np.random.default_rng(seed))
        ref = Reference(noisy, 2, 3)
        t0 = time.perf_counter()
        ref.run()
        t_ref = time.perf_counter() - t0
        t0 = time.perf_counter()
        res = fit(noisy, order=8, delay="none")
        t_bf = time.perf_counter() - t0
        print(f"   {seed:4d} {'scikit-rf':10} {t_ref * 1e3:9.1f} {_rms_rel(ref.response(), h):12.2e} "
              f"{_pole_freq_error(ref.poles, truth.poles):10.2e} {ref.iterations:5d} {'':>11}")
        print(f"   {seed:4d} {'benchfit':10} {t_bf * 1e3:9.1f} "
              f"{_rms_rel(res.response(clean.freq_hz), h):12.2e} "
              f"{_pole_freq_error(res.model.poles, truth.poles):10.2e} {res.stats['iterations']:5d} "
              f"{res.stats['residual_over_floor']:11.2f}")

    # 3. delay
    print("\n3. 150 ns delay, noiseless")
    dl = converter_plant(delay_s=150e-9)
    dsw = sweep(dl)
    for n_real, n_cmplx in ((2, 3), (2, 4), (2, 5), (2, 6)):
        ref = Reference(dsw, n_real, n_cmplx).run()
        print(f"   scikit-rf order {n_real + 2 * n_cmplx:2d}: rms rel err "
              f"{_rms_rel(ref.response(), dsw.response):.2e}")
    t0 = time.perf_counter()
    res = fit(dsw)
    t_bf = time.perf_counter() - t0
    print(f"   benchfit auto: order {res.stats['order']}, delay {res.model.delay_s * 1e9:.4f} ns, "
          f"pole err {_pole_error(res.model.poles, dl.poles):.1e}, rms {res.stats['rms_db']:.1e} dB, "
          f"{t_bf * 1e3:.0f} ms")
    noisy = sweep(dl, noise_db=0.1, noise_deg=0.5, rng=np.random.default_rng(1))
    res = fit(noisy)
    d = res.parameter("delay_s") if res.model.delay_s else None
    print(f"   benchfit auto, noisy: order {res.stats['order']}, delay "
          f"{(d.value * 1e9) if d else 0:.2f} ± {(d.stderr * 1e9) if d else 0:.2f} ns, "
          f"pole f err {_pole_freq_error(res.model.poles, dl.poles):.2e}")

    # 4. automatic order + delay + refinement
    print("\n4. automatic order + delay + refinement, 1601 points")
    for label, data in (("noiseless", clean),
                        ("noisy seed 0", sweep(truth, noise_db=0.1, noise_deg=0.5,
                                               rng=np.random.default_rng(0)))):
        t, res = _time(lambda data=data: fit(data), max(3, args.repeat // 4))
        scaled = fit(data.with_response(data.response / 1000.0))
        print(f"   {label:13}: {t * 1e3:7.1f} ms, order {res.stats['order']}, "
              f"delay {'yes' if res.model.delay_s else 'no'}; data/1000 -> order "
              f"{scaled.stats['order']}")


if __name__ == "__main__":
    main()
