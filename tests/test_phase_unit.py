"""Degrees or radians: Bode's gain-phase relation as the evidence, and the reader's rule.

Reference: H. W. Bode, *Network Analysis and Feedback Amplifier Design* (1945), ch. XIV:
the phase of a minimum-phase function follows from its magnitude; the exact phases
compared with come from scipy.signal.freqs on the same transfer functions.
"""

import numpy as np
import pytest
from scipy import signal

from benchfit.data import read_sweep
from benchfit.data.phaseunit import bode_phase, phase_unit_evidence

F = np.logspace(0, 6, 241)


def _exact(num, den):
    """Magnitude (dB) and unwrapped phase (rad) of num/den from scipy.signal.freqs."""
    _, h = signal.freqs(num, den, worN=2 * np.pi * F)
    return 20 * np.log10(np.abs(h)), np.unwrap(np.angle(h))


@pytest.mark.parametrize("num,den", [
    ([1.0], [1 / (2 * np.pi * 1e3), 1.0]),                                     # one pole at 1 kHz
    ([1.0], np.polymul([1 / (2 * np.pi * 1e2), 1], [1 / (2 * np.pi * 1e4), 1])),  # two poles
    ([1 / (2 * np.pi * 3e2), 1.0], [1 / (2 * np.pi * 3e3), 1.0]),            # lead-lag
    ([1.0], [1 / (2 * np.pi * 1e3) ** 2, 0.5 / (2 * np.pi * 1e3), 1.0]),     # Q = 2 resonance
])
def test_bode_phase_of_minimum_phase_parts_matches_scipy(num, den):
    mag_db, phase = _exact(num, den)
    # a decade inside the band's ends, where the end slopes have settled
    inner = (F > 1e1) & (F < 1e5)
    np.testing.assert_allclose(bode_phase(F, mag_db)[inner], phase[inner], atol=0.02)


def test_bode_phase_of_an_integrator_is_minus_90_degrees():
    # 1/s: -20 dB/decade everywhere, phase -π/2 (Bode 1945; any control text)
    np.testing.assert_allclose(bode_phase(F, -20 * np.log10(F)), -np.pi / 2, atol=1e-3)


def _rows(mag_db, phase, fmt="{:.4f}"):
    return [f"{f:.6g},{m:.4f},{fmt.format(p)}" for f, m, p in zip(F, mag_db, phase, strict=True)]


def _small_phase_amplifier(seed=3):
    """Gain 2 with a pole at 2 MHz swept to 50 kHz, measured (noise, 1° offset): phase within ±3°."""
    rng = np.random.default_rng(seed)
    f = F[F <= 5e4]
    h = 2 / (1 + 1j * f / 2e6)
    mag = 20 * np.log10(np.abs(h)) + rng.normal(0, 0.02, f.size)   # 0.02 dB noise
    deg = np.degrees(np.angle(h)) + rng.normal(0, 0.3, f.size) + 1.0  # 0.3° noise, 1° offset
    return f, mag, deg


def test_small_phase_degrees_sweep_is_not_doubted(tmp_path):
    f, mag, deg = _small_phase_amplifier()
    assert 0.2 < np.max(np.abs(deg)) <= 3.0
    assert phase_unit_evidence(f, mag, deg) == "deg"
    rows = [f"{a:.6g},{m:.4f},{p:.3f}" for a, m, p in zip(f, mag, deg, strict=True)]
    p = tmp_path / "amp.csv"
    p.write_text("\n".join(["Frequency (Hz),Gain (dB),Phase (deg)", *rows]) + "\n")
    r = read_sweep(p)
    assert r.meta["dialect"]["phase_form"] == "deg"
    assert not any("phase column" in w for w in r.meta["warnings"]), r.meta["warnings"]
    # the same file with no unit named is read as degrees, and says why
    p.write_text("\n".join(["Frequency,Gain,Phase", *rows]) + "\n")
    r = read_sweep(p, mag="db")
    assert r.meta["dialect"]["phase_form"] == "deg"
    assert any("follows the magnitude slope as degrees" in w for w in r.meta["warnings"])


def test_radians_under_a_degrees_header_are_detected(tmp_path):
    # one pole at 1 kHz written in radians (0 to -1.57) under a degrees header
    mag_db, phase = _exact([1.0], [1 / (2 * np.pi * 1e3), 1.0])
    rng = np.random.default_rng(4)
    phase = phase + np.radians(rng.normal(0, 0.3, F.size))
    assert phase_unit_evidence(F, mag_db, phase) == "rad"
    p = tmp_path / "rad.csv"
    p.write_text("\n".join(["Frequency (Hz),Gain (dB),Phase (deg)", *_rows(mag_db, phase)]) + "\n")
    w = read_sweep(p).meta["warnings"]
    assert any("labelled degrees" in x and "follows the magnitude slope as radians" in x for x in w), w
    # unlabelled: read as radians by the same evidence
    p.write_text("\n".join(["Frequency,Gain,Phase", *_rows(mag_db, phase)]) + "\n")
    assert read_sweep(p, mag="db").meta["dialect"]["phase_form"] == "rad"


def test_a_flat_noise_free_phase_is_unclear():
    # a pure delay (flat magnitude, phase linear in f) in radians: indistinguishable from a
    # far pole's few degrees, so no unit is claimed
    f = np.logspace(1, 4, 60)
    assert phase_unit_evidence(f, np.zeros_like(f), -2 * np.pi * f * 2e-5) == "unclear"
    assert phase_unit_evidence(f[:4], np.zeros(4), np.ones(4)) == "unclear"
