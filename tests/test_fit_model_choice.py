"""Model choice of fit() on the cases of issues 14 and 19: poles above the band, the order,
parameters and delay the user asks for, stability, a delay the phase estimate misses.

Truth is generated with scipy.signal.freqs_zpk (reference: scipy's zpk frequency response),
and the fitted models are evaluated with it too; the noise is our own (Gaussian, in dB
and degrees per point).  Seeds are not the ones benchmarks/fit_model_choice.py prints.
"""

import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from scipy import signal

from benchfit.data import FrequencyResponse, read_sweep
from benchfit.fitting import fit
from benchfit.fitting.synthetic import from_factors, sweep

TWO_PI = 2.0 * np.pi


def _two_pole(f2_hz, seed, noise_db=0.01, noise_deg=0.05, n=201):
    """1/((1+s/ω1k)(1+s/ω2)) over 10 Hz..100 kHz with noise; truth from scipy.signal.freqs_zpk."""
    f = np.geomspace(10.0, 100e3, n)
    p = [-TWO_PI * 1e3, -TWO_PI * f2_hz]
    _, h = signal.freqs_zpk([], p, np.prod(np.abs(p)), TWO_PI * f)
    rng = np.random.default_rng(seed)
    h = h * 10 ** (rng.normal(0, noise_db, n) / 20) * np.exp(1j * np.radians(rng.normal(0, noise_deg, n)))
    return FrequencyResponse(freq_hz=f, response=h, quantity="plant")


def _model_error(res, f, z, p, k):
    """Largest relative difference between the fitted model and a zpk truth, both through
    scipy.signal.freqs_zpk (the fitted model's own zpk, its delay applied)."""
    w = TWO_PI * f
    _, h_fit = signal.freqs_zpk(res.model.zeros, res.model.poles, res.model.k, w)
    h_fit = h_fit * np.exp(-1j * w * res.model.delay_s)
    _, h_true = signal.freqs_zpk(z, p, k, w)
    return float(np.max(np.abs(h_fit / h_true - 1.0)))


@pytest.mark.parametrize("seed", [20, 21, 22, 23])
def test_a_pole_at_3_5x_the_top_is_kept_at_the_floor(seed):
    # Issue 14: the 350 kHz pole was dropped unconditionally (above 3x f_max), leaving the
    # fit 1500-3700x above the floor with 3.8 deg rms phase error.
    r = _two_pole(350e3, seed)
    res = fit(r)
    assert res.stats["order"] == 2 and res.model.delay_s == 0.0
    assert res.stats["reduced_chi2"] <= 1.5
    assert res.parameter("pole1_hz").value == pytest.approx(1e3, rel=0.01)
    p2 = res.parameter("pole2_hz")
    assert abs(p2.value - 350e3) <= 3 * p2.stderr
    assert res.stats["rms_deg"] < 0.1
    p = [-TWO_PI * 1e3, -TWO_PI * 350e3]
    assert _model_error(res, r.freq_hz, [], p, np.prod(np.abs(p))) < 0.01
    assert not any("above 3" in n for n in res.notes)


@pytest.mark.parametrize("ratio", [2.0, 3.5, 5.0, 10.0])
def test_two_pole_family_keeps_or_drops_the_upper_pole_only_as_the_noise_allows(ratio):
    # Issue 14's family: reduced chi2 <= 1.5 on every seed, the 1 kHz pole within 1 %, and
    # the above-band pole either kept or dropped only when keeping it gains less than the
    # noise (Schwarz's ln N per parameter, the drop test of selection.ic_allows).
    for seed in range(200, 210):
        r = _two_pole(ratio * 100e3, seed)
        res = fit(r)
        assert res.stats["reduced_chi2"] <= 1.5, (ratio, seed)
        low = min(abs(res.model.poles)) / TWO_PI
        assert low == pytest.approx(1e3, rel=0.01), (ratio, seed)
        if res.stats["order"] < 2:
            two = fit(r, order=2, delay="none")
            n_res = 2 * r.freq_hz.shape[0]
            chi2_1 = res.stats["reduced_chi2"] * (n_res - len(res.varied))
            chi2_2 = two.stats["reduced_chi2"] * (n_res - len(two.varied))
            assert (chi2_1 - chi2_2) / two.stats["reduced_chi2"] <= np.log(n_res), (ratio, seed)


def test_a_loosely_located_pole_above_the_band_stays_with_a_note():
    # With ten times the noise a pole at 5x the top is located only to tens of percent,
    # yet dropping it costs more than the noise: it stays, with its large σ and a note.
    kept = 0
    for seed in range(300, 306):
        res = fit(_two_pole(500e3, seed, noise_db=0.1, noise_deg=0.5))
        assert res.stats["reduced_chi2"] <= 1.5
        if res.stats["order"] == 2:
            kept += 1
            p2 = res.parameter("pole2_hz")
            if p2.stderr > 0.2 * p2.value:
                assert any("locate it only loosely" in n for n in res.notes), res.notes
    assert kept >= 3


def test_order_fix_and_delay_options_are_honoured():
    r = _two_pole(350e3, 22)
    res = fit(r, order=2, delay="none")
    assert res.stats["order"] == 2 and res.model.delay_s == 0.0
    assert "delay_s" not in [p.name for p in res.parameters]
    held = fit(r, order=2, delay="none", fix={"pole2_hz": 350e3})
    p2 = held.parameter("pole2_hz")
    assert p2.fixed and p2.value == 350e3
    assert held.parameter("pole1_hz").value == pytest.approx(1e3, rel=0.01)
    # One pole asked for: one pole given, and the residual says it is not enough.
    one = fit(r, order=1, delay="none")
    assert one.stats["order"] == 1
    assert any("residual above the noise" in w for w in one.warnings)
    # Three poles asked for on two-pole data: three given, and a note says fewer would do.
    three = fit(r, order=3, delay="none")
    assert three.stats["order"] == 3
    assert any("may accept 1 pole(s) fewer" in n for n in three.notes)
    # A name the asked order cannot hold is an error naming the option.
    from benchfit.errors import InputError
    with pytest.raises(InputError, match="pole3_hz") as e:
        fit(r, order=2, delay="none", fix={"pole3_hz": 1e6})
    assert e.value.source == "--fix"


def test_a_pair_the_user_names_is_made_from_the_two_poles():
    r = _two_pole(350e3, 23)
    res = fit(r, order=2, delay="none", bounds={"pair1_q": (0.0, 0.5)})
    assert [p.name for p in res.parameters][:3] == ["gain", "pair1_f0_hz", "pair1_q"]
    # The same roots as the truth: f0 = sqrt(1k * 350k), Q = f0 / (1k + 350k).
    f0 = np.sqrt(1e3 * 350e3)
    assert res.parameter("pair1_f0_hz").value == pytest.approx(f0, rel=0.01)
    assert res.stats["reduced_chi2"] <= 1.5


def test_cli_order_fix_delay_none(tmp_path):
    r = _two_pole(350e3, 21)
    src = tmp_path / "two_pole.csv"
    mag = 20 * np.log10(np.abs(r.response))
    ph = np.degrees(np.angle(r.response))
    src.write_text("freq_hz,mag_db,phase_deg\n" + "".join(
        f"{float(a)!r},{float(b)!r},{float(c)!r}\n" for a, b, c in zip(r.freq_hz, mag, ph, strict=True)))
    out = subprocess.run([sys.executable, "-m", "benchfit", "fit", str(src), "--order", "2",
                          "--delay", "none", "--fix", "pole2_hz=350k", "--json"],
                         capture_output=True, text=True)
    assert out.returncode == 0, out.stderr
    import json
    d = json.loads(out.stdout)
    names = {p["name"]: p for p in d["parameters"]}
    assert set(names) == {"gain", "pole1_hz", "pole2_hz"}
    assert names["pole2_hz"]["value"] == 350e3 and names["pole2_hz"]["fixed"]
    bad = subprocess.run([sys.executable, "-m", "benchfit", "fit", str(src), "--order", "2",
                          "--fix", "pair2_q=3"], capture_output=True, text=True)
    assert bad.returncode == 2 and "--fix" in bad.stderr and "Traceback" not in bad.stderr


def _unstable_sweep(seed):
    # A right-half-plane pole at 1 kHz and a stable one at 20 kHz; truth from scipy.signal.freqs_zpk.
    f = np.geomspace(10.0, 200e3, 301)
    p = [TWO_PI * 1e3, -TWO_PI * 20e3]
    _, h = signal.freqs_zpk([], p, -np.prod(np.abs(p)), TWO_PI * f)
    rng = np.random.default_rng(seed)
    h = h * 10 ** (rng.normal(0, 0.02, f.shape) / 20) * np.exp(1j * np.radians(rng.normal(0, 0.1, f.shape)))
    return FrequencyResponse(freq_hz=f, response=h, quantity="plant")


def test_a_right_half_plane_pole_is_a_warning_saying_the_data_demand_it():
    r = _unstable_sweep(40)
    res = fit(r, delay="none")
    assert not res.model.is_stable
    assert any("right-half-plane pole" in w and "the data demand them" in w for w in res.warnings)
    held = fit(r, delay="none", stable=True)
    assert held.model.is_stable
    assert held.stats["reduced_chi2"] > res.stats["reduced_chi2"]


def test_impedance_data_are_held_stable_by_default():
    m = from_factors(50.0, poles_hz=(1e3,), pairs=((40e3, 4.0),), zeros_hz=(10e3,))
    r = sweep(m, np.geomspace(10, 1e6, 300), noise_db=0.05, noise_deg=0.3,
              rng=np.random.default_rng(41), quantity="impedance")
    res = fit(r)
    assert res.model.is_stable
    assert any("left half-plane" in n for n in res.notes)


BUCK = {"gain": 8.0, "pole1_hz": 400.0, "zero1_hz": 25e3, "pair1_f0_hz": 250e3,
        "pair1_q": 1.2, "delay_s": 300e-9}


def test_buck_plant_with_delay_coverage_over_50_seeds():
    # Issue 19: peak-current-mode buck control-to-output plant (gain 8, pole 400 Hz, ESR zero
    # 25 kHz, pair 250 kHz Q 1.2, 300 ns delay), 601 log points 20 Hz..500 kHz, 0.15 dB /
    # 0.8 deg noise.  12 of 60 seeds ended without the delay and with an invented pole near
    # 385 kHz (σ 20x too small).  Over 50 seeds the truth must lie inside ±2σ on 90-99 %
    # of all (seed, parameter) cases (Gaussian: 95.4 %), and on at least 42 of 50 seeds
    # for each parameter (binomial lower tail at 95.4 %: below 1 %).
    m = from_factors(8.0, poles_hz=(400.0,), zeros_hz=(25e3,), pairs=((250e3, 1.2),),
                     delay_s=300e-9)
    f = np.geomspace(20.0, 500e3, 601)
    inside = {k: 0 for k in BUCK}
    right = 0
    for seed in range(1000, 1050):
        res = fit(sweep(m, f, noise_db=0.15, noise_deg=0.8, rng=np.random.default_rng(seed)))
        assert res.stats["reduced_chi2"] <= 1.5 or any(
            "residual above the noise" in w for w in res.warnings)
        names = {p.name for p in res.parameters}
        right += names == set(BUCK)
        for k, want in BUCK.items():
            if k in names:
                p = res.parameter(k)
                inside[k] += bool(np.isfinite(p.stderr) and abs(p.value - want) <= 2 * p.stderr)
    assert right >= 48
    total = sum(inside.values()) / (50 * len(BUCK))
    assert 0.90 <= total <= 0.99, inside
    assert min(inside.values()) >= 42, inside


SKRF = pytest.importorskip("skrf")
SKRF_DATA = Path(SKRF.__file__).parent / "data"


@pytest.mark.parametrize("name, param", [("ntwk1.s2p", "S21"), ("ntwk1.s2p", "S11"),
                                         ("ind.s2p", "S21"), ("open.s2p", "S21"),
                                         ("ring slot.s2p", "S11")])
def test_scikit_rf_shipped_files_fit_near_their_floor(name, param):
    # scikit-rf's shipped Touchstone files (simulated and measured devices nobody here wrote)
    # fitted 5.6e10 (ntwk1 S21) down to 8.5x (ring slot) above their floor while poles above
    # the band were dropped unconditionally.  Now each reaches the floor.
    res = fit(read_sweep(SKRF_DATA / name, param=param))
    assert res.stats["reduced_chi2"] <= 2.0, res.stats
    assert res.model.is_stable       # passive data are held stable by default


def test_a_pole_above_the_band_beside_a_resonance_is_not_mimicked_by_zeros():
    # Pole 100 Hz, pair 20 kHz Q 10, pole 250 kHz above a 10 Hz..100 kHz band, 0.05 dB /
    # 0.3 deg.  On 4 of 20 seeds the 250 kHz pole went first in the pruning and a
    # right-half-plane zero at 250 kHz with an undamped zero pair at 263 kHz took its
    # place (seven parameters for five).
    f = np.geomspace(10, 100e3, 301)
    p = [-TWO_PI * 100.0, -TWO_PI * 250e3, *signal.tf2zpk([1.0], [1.0, TWO_PI * 20e3 / 10.0,
                                                                  (TWO_PI * 20e3) ** 2])[1]]
    k = 2.0 * float(np.real(np.prod(np.abs(p))))
    _, h0 = signal.freqs_zpk([], p, k, TWO_PI * f)      # reference: scipy
    for seed in (60, 61, 65, 66, 400, 401):
        rng = np.random.default_rng(seed)
        h = h0 * 10 ** (rng.normal(0, 0.05, f.shape) / 20) * np.exp(1j * np.radians(rng.normal(0, 0.3, f.shape)))
        res = fit(FrequencyResponse(freq_hz=f, response=h))
        assert [p.name for p in res.parameters] == ["gain", "pole1_hz", "pole2_hz", "pair1_f0_hz",
                                                    "pair1_q"], seed
        assert res.parameter("pair1_q").value == pytest.approx(10.0, rel=0.05)
        assert _model_error(res, f, [], p, k) < 0.02


def test_a_negative_delay_does_not_wreck_a_fixed_order_fit():
    # scikit-rf's measured 'ring slot measured.s1p' at --order 5: the delay hypothesis
    # refined to a negative delay, and dropping it as it stood left the fit at 80x the
    # floor against 2.8x without a delay.  Now --delay auto is no worse than --delay none.
    r = read_sweep(SKRF_DATA / "ring slot measured.s1p")
    auto, none = fit(r, order=5), fit(r, order=5, delay="none")
    assert auto.stats["order"] == 5 and auto.model.delay_s >= 0
    assert auto.stats["reduced_chi2"] <= 1.05 * none.stats["reduced_chi2"]


def test_fewer_poles_note_counts_the_poles_above_the_band_the_data_cannot_locate():
    # The rule reads the final refinement's standard errors only (no extra fit): a pole
    # group above the band with σ above its value counts (a pair as two poles); one in the
    # band, or one above it that the data locate, does not; none when the user holds a pole.
    from types import SimpleNamespace

    from benchfit.fitting.final import fewer_poles_note
    from benchfit.fitting.parameters import Structure
    from benchfit.fitting.refine import Refined

    st = Structure(real_poles=3, pole_pairs=1)
    names = st.names  # gain, pole1..3_hz, pair1_f0_hz, pair1_q
    values = dict(gain=1.0, pole1_hz=1e3, pole2_hz=5e5, pole3_hz=2e6, pair1_f0_hz=3e6, pair1_q=0.7)
    stderr = dict(gain=1e-3, pole1_hz=1.0, pole2_hz=1e4, pole3_hz=5e6, pair1_f0_hz=1e5,
                  pair1_q=2.0)
    ref = Refined(values=np.array([values[n] for n in names]),
                  stderr=np.array([stderr[n] for n in names]), varied=names,
                  covariance=np.eye(len(names)), evaluations=1, success=True, chisqr=1.0,
                  redchi=1.0, message="")
    pb = SimpleNamespace(f=np.geomspace(10.0, 1e5, 11), order=5, held=lambda *kinds: False)
    note = fewer_poles_note(pb, st, ref)
    assert note is not None and "3 pole(s) fewer" in note and "--order 5" in note
    held = SimpleNamespace(f=pb.f, order=5, held=lambda *kinds: True)
    assert fewer_poles_note(held, st, ref) is None
    sure = Refined(**{**ref.__dict__, "stderr": ref.stderr * 1e-3})
    assert fewer_poles_note(pb, st, sure) is None
