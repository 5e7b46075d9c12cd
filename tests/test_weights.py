"""Per-point noise σ from the data's own scatter (benchfit.fitting.weights)."""

import numpy as np
import pytest

from benchfit.fitting.weights import point_sigma, scatter_sigma


def test_third_differences_of_white_noise_have_twenty_times_its_variance():
    # Handbook identity: x[k+2] − 3x[k+1] + 3x[k] − x[k−1] of independent samples has
    # variance (1 + 9 + 9 + 1)σ² = 20σ² (binomial coefficients of the third difference).
    rng = np.random.default_rng(5)
    x = 0.7 * rng.standard_normal(200_000)
    d3 = x[3:] - 3 * x[2:-1] + 3 * x[1:-2] - x[:-3]
    assert np.var(d3) == pytest.approx(20 * 0.49, rel=0.02)
    assert np.median(scatter_sigma(x[:4001])) == pytest.approx(0.7, rel=0.05)


@pytest.mark.parametrize("n", [201, 401, 1601])
def test_a_flat_noise_floor_gets_one_sigma(n):
    # White noise of one σ: the running estimate only wanders (on 401 points its lowest value
    # used to sit near half the truth, giving those points four times their weight), so the
    # flat estimate must win in nearly every sweep and sit near the truth.
    flat, ratios = 0, []
    for seed in range(20):
        s = scatter_sigma(2.0 * np.random.default_rng(seed).standard_normal(n))
        flat += np.ptp(s) == 0
        ratios.append(np.min(s) / 2.0)
    assert flat >= 17
    assert 0.85 < np.median(ratios) < 1.1


@pytest.mark.parametrize("rise", [4.0, 10.0])
def test_a_rising_noise_floor_is_followed(rise):
    # σ rising geometrically over the sweep (an analyzer's floor where |H| falls).
    n = 401
    true = np.geomspace(1.0, rise, n)
    got = np.array([scatter_sigma(true * np.random.default_rng(s).standard_normal(n)) / true
                    for s in range(30)])
    assert np.all(np.ptp(got * true, axis=1) > 0)  # the running estimate, not the flat one
    med = np.median(got, axis=0)
    assert np.all((med > 0.8) & (med < 1.25)), (med.min(), med.max())


def test_a_glitch_does_not_inflate_its_neighbours_sigma():
    rng = np.random.default_rng(3)
    x = rng.standard_normal(401)
    x[200] += 200.0  # one wild sample
    s = scatter_sigma(x)
    assert np.all(s < 1.3), s.max()


def test_relative_complex_noise_gives_equal_sigma_for_magnitude_and_phase():
    # h·(1 + ε(a + jb)) with a, b ~ N(0, 1): ln|H| and the phase each get σ ≈ ε.
    rng = np.random.default_rng(11)
    f = np.geomspace(10, 1e6, 801)
    h = 1.0 / (1 + 1j * f / 1e3) * (1 + 0.004 * (rng.standard_normal(801)
                                                 + 1j * rng.standard_normal(801)))
    sg = point_sigma(h)
    assert np.median(sg.mag) == pytest.approx(0.004, rel=0.1)
    assert np.median(sg.phase) == pytest.approx(0.004, rel=0.1)
