"""The one number formatter: SI prefixes, significant figures, one spacing rule."""

import math

import pytest

from benchfit import numfmt


@pytest.mark.parametrize("value, unit, text", [
    # SI prefixes (SI Brochure, 9th ed., 2019, table 7) attached to the unit symbol, one space before it
    (19560.0, "Hz", "19.6 kHz"), (20e3, "Hz", "20 kHz"), (1.036e5, "Hz", "104 kHz"),
    (10e3, "ohm", "10 kΩ"), (604.0, "Ω", "604 Ω"), (2.7e-9, "F", "2.7 nF"), (150e-12, "F", "150 pF"),
    (8.06e-6, "s", "8.06 µs"), (1e-6, "s", "1 µs"), (0.5, "A", "500 mA"), (-0.0601, "V", "-60.1 mV"),
    (0.0, "V", "0 V"), (2e8, "Hz", "200 MHz"), (5.6e-5, "Hz", "56 µHz"),
    # rounding that carries into the next prefix
    (999.96, "Hz", "1 kHz"), (999_960.0, "Hz", "1 MHz"),
])
def test_eng(value, unit, text):
    assert numfmt.eng(value, unit) == text


def test_eng_digits_and_ticks():
    assert numfmt.eng(12_560.0, "Ω", 4) == "12.56 kΩ"
    assert numfmt.eng(10_000.0) == "10k"
    assert numfmt.tick(1e6) == "1M" and numfmt.tick(1.0) == "1" and numfmt.tick(100.0) == "100"


def test_sig_fixed_figures_without_exponent():
    assert numfmt.sig(0.8213) == "0.821"
    assert numfmt.sig(17.63) == "17.6"
    assert numfmt.sig(12345.0) == "12300"      # three figures, not five
    assert numfmt.sig(2.0) == "2"
    assert numfmt.sig(99.96) == "100"
    assert numfmt.sig(1.5e-7) == "1.5e-7"


def test_angles_levels_percent_slopes():
    # the degree sign takes no space (SI Brochure 5.4.3), % and dB take one
    assert numfmt.deg(56.81) == "56.8°" and numfmt.deg(56.0) == "56.0°"
    assert numfmt.db(32.84) == "32.8 dB"
    assert numfmt.pct(0.942) == "94.2 %" and numfmt.pct(1.0) == "100.0 %"
    assert numfmt.db_per_decade(21.4) == "21 dB/decade"
    assert numfmt.quantity(56.81, "deg") == "56.8°"
    assert numfmt.quantity(4.2, "1") == "4.2"
    assert numfmt.quantity(0.0123, "ohm") == "12.3 mΩ"


def test_not_finite_in_words():
    assert numfmt.eng(math.nan, "Hz") == "not defined"
    assert numfmt.db(math.inf) == "none (∞)"
    assert numfmt.deg(None) == "not defined"
    assert numfmt.or_reason(math.nan, "x", "no phase crossing in the band") == "no phase crossing in the band"
    assert numfmt.or_reason(3.0, "x", "why") == "x"


def test_a_figure_known_to_a_resolution_reads_zero_below_half_of_it():
    # The measured step instant is a sample time: -1.36e-20 s on a 500 ns grid is the
    # time axis's rounding residue of the sample at 0, and reads as 0 s.
    assert numfmt.eng(numfmt.to_resolution(-1.36e-20, 500e-9), "s") == "0 s"
    assert numfmt.to_resolution(-1e-6, 500e-9) == -1e-6
    assert numfmt.to_resolution(300e-9, 500e-9) == 300e-9
    assert numfmt.to_resolution(1e-20, float("nan")) == 1e-20
    assert math.isnan(numfmt.to_resolution(float("nan"), 1e-6))
