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


# --- rounded frequency columns (weights.printed_digits, frequency_sigma)

def test_printed_digits_counts_the_significant_digits_of_a_column():
    from benchfit.fitting.weights import printed_digits

    f = np.logspace(0, 4, 301)
    assert printed_digits(np.array([float(f"{x:.6g}") for x in f])) == 6
    assert printed_digits(np.array([10.0, 20.0, 50.0, 100.0])) == 1
    assert printed_digits(f) is None  # full float precision


def test_a_six_digit_log_sweep_carries_the_rounding_error_of_its_last_digit():
    # Handbook: rounding to a unit u leaves a uniform error on [−u/2, u/2], σ = u/√12.
    from benchfit.fitting.weights import frequency_sigma

    f = np.logspace(0, 4, 301)
    f6 = np.array([float(f"{x:.6g}") for x in f])
    sf = frequency_sigma(f6)
    unit = 10.0 ** (np.floor(np.log10(f6)) - 5)
    assert np.allclose(sf, unit / np.sqrt(12.0))
    # the rounding really is that size: the printed column departs from the true one by it
    assert np.std((f6 - f) / unit) == pytest.approx(1 / np.sqrt(12.0), rel=0.15)


@pytest.mark.parametrize("column", [
    np.logspace(0, 4, 301),                                   # full precision
    np.array([100.0, 150.0, 220.0, 330.0, 470.0, 680.0, 1e3, 1.5e3, 2.2e3]),  # E6 set list
    np.arange(100.0, 2100.0, 100.0),                           # exact linear grid
])
def test_exact_or_set_frequencies_get_no_rounding_error(column):
    # IEC 60063 E6 values (the list above) are frequencies an instrument is set to, not
    # a rounded sweep; neither they nor an exact grid gain a σ.
    from benchfit.fitting.weights import frequency_sigma

    assert not np.any(frequency_sigma(column) > 0)


def test_rounded_frequencies_widen_sigma_only_where_the_response_moves_fast():
    # A resonance at 800 Hz, Q 20 (values by scipy.signal.freqs): the phase of a second-order
    # pair turns at 2Q rad per neper of frequency at its centre (handbook: dφ/d ln ω = 2Q at
    # ω0), so a 6-digit frequency error of ~3e-7 relative adds ~40·3e-7 rad there, in
    # quadrature, and next to nothing far from it.
    from scipy import signal

    f = np.logspace(2.5, 3.2, 2001)
    f6 = np.array([float(f"{x:.6g}") for x in f])
    w0 = 2 * np.pi * 800
    _, h = signal.freqs([w0 ** 2], [1, w0 / 20, w0 ** 2], worN=2 * np.pi * f)
    plain = point_sigma(h)
    rounded = point_sigma(h, freq_hz=f6)
    near = np.argmin(np.abs(f - 800))
    added = np.sqrt(rounded.phase ** 2 - plain.phase ** 2)
    sf_rel = 10.0 ** (np.floor(np.log10(f6[near])) - 5) / np.sqrt(12) / f6[near]
    assert added[near] == pytest.approx(40 * sf_rel, rel=0.02)
    assert added[0] < 0.05 * added[near]
    assert "rounded frequencies" in rounded.source
    assert point_sigma(h, freq_hz=f).source == plain.source
