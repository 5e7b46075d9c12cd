"""benchfit's fit side by side with scikit-rf's VectorFitting (the reference library).

Same data, same order, one BLAS thread, one process; CPU time (time.process_time,
steadier than wall time on a shared machine), median of ``--repeat`` runs after
one untimed warm-up.  Cases:

1. fixed order, every case on one table: the noiseless 8th-order converter-like
   plant (1601 log points, 10 Hz..10 MHz) and a few noisy seeds of it
   (0.1 dB / 0.5 deg); the two-pole family with the second pole above the band
   (1 kHz and 2, 3.5, 5, 10 × the top frequency of 10 Hz..100 kHz, 201 points,
   0.01 dB / 0.05 deg); a few of scikit-rf's shipped Touchstone files.  Per case:
   both times, both rms relative errors (|H_model/H − 1|, against the noiseless
   truth for our plants, against the data for the files), the speed ratio
   (reference time / benchfit time, target ≥ 1.5) and the error ratio
   (benchfit / reference, target ≤ 1), and whether benchfit returned the order
   asked for;
2. the plant with a 150 ns delay: order needed by each, delay found;
3. benchfit's automatic order + delay + refinement time on 1601 points (target:
   median under 80 ms), and the order it picks for the data and for the data
   divided by 1000 (scale invariance).

    python benchmarks/fit_vs_reference.py [--repeat 5] [--seeds 3] [--cases fixed,delay,auto]

Prints figures only; nothing is asserted (timings are not tests).
"""

from __future__ import annotations

import os

for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ[_var] = "1"  # pin BLAS before numpy loads

import argparse  # noqa: E402
import time  # noqa: E402
import warnings  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402

import benchfit  # noqa: E402
from benchfit.fitting import fit  # noqa: E402
from benchfit.fitting.synthetic import converter_plant, from_factors, sweep  # noqa: E402

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
    """Median CPU time of ``repeat`` calls after one untimed warm-up, and the last outcome."""
    out = fn()  # warm-up (imports, caches)
    t = []
    for _ in range(repeat):
        t0 = time.process_time()
        out = fn()
        t.append(time.process_time() - t0)
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


#: scikit-rf's shipped files used here (parameter, order): a measured ring-slot
#: resonator, a simulated coaxial line, an RF one-port and a lossy waveguide line.
SKRF_CASES = (("ring slot.s2p", "S21", 8), ("line.s2p", "S21", 8), ("ro,3.s1p", "S11", 6),
              ("wr2p2,line.s2p", "S21", 8))


def two_pole_sweep(ratio: float, seed: int, noise: bool = True):
    """1/((1+s/ω1k)(1+s/ωp)), the second pole at ``ratio`` × 100 kHz, 201 points."""
    f = np.geomspace(10.0, 100e3, 201)
    m = from_factors(1.0, poles_hz=(1e3, ratio * 100e3))
    if not noise:
        return sweep(m, f)
    return sweep(m, f, noise_db=0.01, noise_deg=0.05, rng=np.random.default_rng(seed))


def fixed_cases(seeds: int):
    """(label, data, truth response or None, order, real poles, complex pairs) per case."""
    truth = converter_plant()
    clean = sweep(truth)
    out = [("converter noiseless", clean, clean.response, 8, 2, 3)]
    for seed in range(seeds):
        noisy = sweep(truth, noise_db=0.1, noise_deg=0.5, rng=np.random.default_rng(seed))
        out.append((f"converter seed {seed}", noisy, clean.response, 8, 2, 3))
    for ratio in (2.0, 3.5, 5.0, 10.0):
        exact = two_pole_sweep(ratio, 0, noise=False).response
        out.append((f"2-pole, p2 {ratio:g}x top", two_pole_sweep(ratio, 0), exact, 2, 2, 0))
    skrf_dir = Path(__import__("skrf").__file__).parent / "data"
    for name, par, n in SKRF_CASES:
        data = benchfit.read_sweep(skrf_dir / name, param=par)
        out.append((f"skrf {name} {par}", data, None, n, n % 2, n // 2))
    return out


def run_fixed(args) -> None:
    print("\n1. fixed order: CPU ms (median of %d), rms relative error, ratios" % args.repeat)
    print(f"   {'case':27} {'N':>2} {'skrf ms':>8} {'bf ms':>8} {'speed':>6} {'skrf err':>9} "
          f"{'bf err':>9} {'err ratio':>9}  note")
    met = 0
    cases = fixed_cases(args.seeds)
    for label, data, exact, n, n_real, n_cmplx in cases:
        ref = Reference(data, n_real, n_cmplx)
        t_ref, _ = _time(ref.run, args.repeat)
        t_bf, res = _time(lambda data=data, n=n: fit(data, order=n, delay="none"), args.repeat)
        want = data.response if exact is None else exact
        e_ref = _rms_rel(ref.response(), want)
        e_bf = _rms_rel(res.response(data.freq_hz), want)
        speed, err = t_ref / t_bf, e_bf / e_ref
        ok = speed >= 1.5 and e_bf <= e_ref
        met += ok
        note = [] if res.stats["order"] == n else [f"returned order {res.stats['order']}"]
        note += ["meets" if ok else "misses"]
        print(f"   {label:27} {n:2d} {t_ref * 1e3:8.1f} {t_bf * 1e3:8.1f} {speed:6.2f} {e_ref:9.2e} "
              f"{e_bf:9.2e} {err:9.2f}  {', '.join(note)}")
    print(f"   target (>= 1.5x faster at equal or better error) met on {met} of {len(cases)} cases")


def run_delay() -> None:
    print("\n2. 150 ns delay, noiseless")
    dl = converter_plant(delay_s=150e-9)
    dsw = sweep(dl)
    for n_real, n_cmplx in ((2, 3), (2, 4), (2, 5), (2, 6)):
        ref = Reference(dsw, n_real, n_cmplx).run()
        print(f"   scikit-rf order {n_real + 2 * n_cmplx:2d}: rms rel err "
              f"{_rms_rel(ref.response(), dsw.response):.2e}")
    t0 = time.process_time()
    res = fit(dsw)
    t_bf = time.process_time() - t0
    print(f"   benchfit auto: order {res.stats['order']}, delay {res.model.delay_s * 1e9:.4f} ns, "
          f"pole err {_pole_error(res.model.poles, dl.poles):.1e}, rms {res.stats['rms_db']:.1e} dB, "
          f"{t_bf * 1e3:.0f} ms")
    noisy = sweep(dl, noise_db=0.1, noise_deg=0.5, rng=np.random.default_rng(1))
    res = fit(noisy)
    d = res.parameter("delay_s") if res.model.delay_s else None
    print(f"   benchfit auto, noisy: order {res.stats['order']}, delay "
          f"{(d.value * 1e9) if d else 0:.2f} ± {(d.stderr * 1e9) if d else 0:.2f} ns, "
          f"pole f err {_pole_freq_error(res.model.poles, dl.poles):.2e}")


def run_auto(args) -> None:
    print("\n3. automatic order + delay + refinement, 1601 points (CPU ms; target median < 80)")
    truth = converter_plant()
    clean = sweep(truth)
    times = []
    for label, data in [("noiseless", clean)] + [
            (f"noisy seed {seed}", sweep(truth, noise_db=0.1, noise_deg=0.5,
                                         rng=np.random.default_rng(seed)))
            for seed in range(args.seeds)]:
        t, res = _time(lambda data=data: fit(data), args.repeat)
        times.append(t)
        scaled = fit(data.with_response(data.response / 1000.0))
        print(f"   {label:13}: {t * 1e3:7.1f} ms, order {res.stats['order']}, "
              f"delay {'yes' if res.model.delay_s else 'no'}; data/1000 -> order "
              f"{scaled.stats['order']}")
    print(f"   median over the cases: {np.median(times) * 1e3:.1f} ms")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--repeat", type=int, default=5, help="timing repeats (median reported)")
    ap.add_argument("--seeds", type=int, default=3, help="noisy seeds of the converter plant")
    ap.add_argument("--cases", default="fixed,delay,auto", help="which sections to run")
    args = ap.parse_args()
    cases = set(args.cases.split(","))
    print(f"one BLAS thread; CPU time; scikit-rf {__import__('skrf').__version__}")
    if "fixed" in cases:
        run_fixed(args)
    if "delay" in cases:
        run_delay()
    if "auto" in cases:
        run_auto(args)


if __name__ == "__main__":
    main()
