"""The vector-fitting core against known models and against scikit-rf's VectorFitting."""

import warnings

import numpy as np
import pytest
from scipy import signal

from benchfit.errors import FitError
from benchfit.fitting.model import PlantModel
from benchfit.fitting.synthetic import converter_plant, from_factors, pair
from benchfit.fitting.vectfit import initial_poles, vector_fit, vf_to_zpk


def _scaled(f):
    scale = 2 * np.pi * np.sqrt(f[0] * f[-1])
    return 1j * 2 * np.pi * f / scale, scale


def _rel_pole_error(got, want):
    got, want = np.sort_complex(np.asarray(got)), np.sort_complex(np.asarray(want))
    assert got.shape == want.shape
    return float(np.max(np.abs(got - want) / np.abs(want)))


def test_noiseless_converter_plant_poles_and_zeros_recovered():
    # Known model built here: VF at the true order must return its poles exactly
    # (Gustavsen & Semlyen 1999: exact data and order give an exact fixed point).
    m = converter_plant()
    f = np.geomspace(10, 10e6, 1601)
    h = m.response(f)
    s, scale = _scaled(f)
    vf = vector_fit(s, h, 1 / np.abs(h), initial_poles(8, abs(s[0]), abs(s[-1])), direct=False)
    assert vf.converged
    z, p, k = vf_to_zpk(vf, scale)
    assert _rel_pole_error(p, m.poles) < 1e-6
    # Strictly proper fit of a relative-degree-6 plant: the two true zeros and
    # spare ones far above the band.
    near = z[np.abs(z) < 3 * 2 * np.pi * f[-1]]
    assert _rel_pole_error(near, m.zeros) < 1e-6
    hm = PlantModel(z, p, k).response(f)
    assert np.max(np.abs(hm / h - 1)) < 1e-6


def test_direct_and_proportional_terms():
    # H = (s + a)(s + b) / ((s + c)(s + d)) + s·e-like improper impedance: R + sL || C
    f = np.geomspace(1e2, 1e7, 400)
    m = from_factors(0.05, pairs=((2e5, 2.0),), zero_pairs=((1e6, 0.7),), zeros_hz=(3e6,))
    h = m.response(f)
    s, scale = _scaled(f)
    vf = vector_fit(s, h, 1 / np.abs(h), initial_poles(2, abs(s[0]), abs(s[-1])),
                    direct=True, proportional=True)
    z, p, k = vf_to_zpk(vf, scale)
    assert _rel_pole_error(p, m.poles) < 1e-6
    assert _rel_pole_error(z, m.zeros) < 1e-6
    assert k == pytest.approx(m.k, rel=1e-6)


def test_model_evaluation_matches_scipy_freqs_zpk():
    # Reference: scipy.signal.freqs_zpk evaluates a zpk model (s in rad/s).
    m = converter_plant()
    f = np.geomspace(10, 1e7, 300)
    _, ref = signal.freqs_zpk(m.zeros, m.poles, m.k, worN=2 * np.pi * f)
    assert np.allclose(m.response(f), ref, rtol=1e-12, atol=0)


def test_gustavsen_semlyen_1999_test_function():
    # The 18-pole artificial test function of Gustavsen & Semlyen (1999), sec. 5
    # (also the example of the authors' VF toolbox). The values below are written
    # from memory of that paper; the check does not depend on them matching it
    # digit for digit: VF at the true order must recover these 18 poles.
    p_real = [-4500.0, -41000.0]
    p_cx = [-100 + 5e3j, -120 + 15e3j, -3e3 + 35e3j, -200 + 45e3j, -1500 + 45e3j,
            -500 + 70e3j, -1e3 + 73e3j, -2e3 + 90e3j]
    r_real = [-3000.0, -83000.0]
    r_cx = [-5 + 7e3j, -20 + 18e3j, 6e3 + 45e3j, 40 + 60e3j, 90 + 10e3j,
            5e4 + 80e3j, 1e3 + 45e3j, -5e3 + 92e3j]
    poles = np.array(p_real + [c for x in p_cx for c in (x, np.conj(x))])
    res = np.array(r_real + [c for x in r_cx for c in (x, np.conj(x))])
    d, e = 0.2, 2e-5
    f = np.geomspace(1, 1e5, 200)
    s_rad = 2j * np.pi * f
    h = (res[None, :] / (s_rad[:, None] - poles[None, :])).sum(axis=1) + d + s_rad * e
    s, scale = _scaled(f)
    vf = vector_fit(s, h, np.ones_like(f), initial_poles(18, abs(s[0]), abs(s[-1])),
                    direct=True, proportional=True, max_iter=50)
    got = vf.poles * scale
    assert _rel_pole_error(got, poles) < 1e-6
    assert np.max(np.abs(vf.at(s) - h) / np.abs(h)) < 1e-8


def test_same_poles_as_scikit_rf_vector_fitting():
    # Reference library: scikit-rf's skrf.vectorFitting.VectorFitting on the same
    # noiseless data and order; both must land on the same 6 poles.
    skrf = pytest.importorskip("skrf")
    from skrf.vectorFitting import VectorFitting

    m = from_factors(2.0, poles_hz=(3e3, 2e6), pairs=((40e3, 5.0), (400e3, 1.0)), zeros_hz=(100e3,))
    f = np.geomspace(100, 1e7, 801)
    h = m.response(f)
    nw = skrf.Network(frequency=skrf.Frequency.from_f(f, unit="hz"), s=h.reshape(-1, 1, 1))
    ref = VectorFitting(nw)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ref.vector_fit(n_poles_real=2, n_poles_cmplx=2, init_pole_spacing="log", fit_constant=True)
    ref_poles = np.concatenate([ref.poles, np.conj(ref.poles[ref.poles.imag != 0])])
    s, scale = _scaled(f)
    vf = vector_fit(s, h, 1 / np.abs(h), initial_poles(6, abs(s[0]), abs(s[-1])), direct=True)
    ours = vf.poles * scale
    assert _rel_pole_error(ours, ref_poles) < 1e-6
    assert _rel_pole_error(ours, m.poles) < 1e-6


def test_unstable_pole_is_mirrored_and_reported():
    # A plant with a right-half-plane pole: VF forces stability by mirroring, and says so.
    f = np.geomspace(10, 1e5, 300)
    m = PlantModel(zeros=[], poles=[2 * np.pi * 500.0, *pair(20e3, 2.0)], k=1e9)
    h = m.response(f)
    s, scale = _scaled(f)
    vf = vector_fit(s, h, 1 / np.abs(h), initial_poles(3, abs(s[0]), abs(s[-1])), direct=False)
    assert np.all(vf.poles.real < 0)
    assert vf.flipped.size >= 1


def test_too_few_points_for_the_order():
    f = np.geomspace(10, 1e3, 6)
    s, _ = _scaled(f)
    with pytest.raises(FitError, match="needs at least"):
        vector_fit(s, np.ones(6, complex) / (1 + s), np.ones(6), initial_poles(8, 0.1, 10))


def test_real_starting_poles_when_asked():
    # A ladder of four real poles (an RC-like impedance), evaluated by scipy.signal.freqs_zpk
    # (general-purpose reference): VF started from four real poles spread over the band
    # returns them to 1e-6 (exact data and order give an exact fixed point, Gustavsen &
    # Semlyen 1999).
    p_hz = np.array([30.0, 800.0, 2e4, 6e5])
    f = np.geomspace(10, 1e6, 801)
    _, h = signal.freqs_zpk([-2 * np.pi * 5e3], -2 * np.pi * p_hz, 1e9, 2 * np.pi * f)
    s, scale = _scaled(f)
    p0 = initial_poles(4, abs(s[0]), abs(s[-1]), n_real=4)
    assert np.all(p0.imag == 0) and p0.shape == (4,)
    vf = vector_fit(s, h, 1 / np.abs(h), p0, direct=False)
    assert vf.converged
    assert _rel_pole_error(vf.poles * scale, -2 * np.pi * p_hz) < 1e-6
    with pytest.raises(ValueError, match="n_real"):
        initial_poles(4, 0.1, 10, n_real=3)


def test_without_mirroring_an_unstable_pole_is_recovered_exactly():
    # Noiseless data with a right-half-plane pole, from scipy.signal.freqs_zpk (reference):
    # the published relocation mirrors it (stability enforcement, Gustavsen & Semlyen 1999)
    # and cannot fit; with mirror=False the exact pole set is a fixed point.
    f = np.geomspace(10, 1e6, 401)
    want = np.array([2 * np.pi * 1e3, -2 * np.pi * 5e4, -2 * np.pi * 2e5])
    _, h = signal.freqs_zpk([-2 * np.pi * 2e4], want, 1e9, 2 * np.pi * f)
    s, scale = _scaled(f)
    p0 = initial_poles(3, abs(s[0]), abs(s[-1]))
    mirrored = vector_fit(s, h, 1 / np.abs(h), p0, direct=False)
    kept = vector_fit(s, h, 1 / np.abs(h), p0, direct=False, mirror=False)
    assert np.all(mirrored.poles.real < 0)
    assert _rel_pole_error(kept.poles * scale, want) < 1e-6
    assert kept.flipped.size == 0
