"""The quantity an export declares in a keyed header line (benchfit.data.declared)."""

from pathlib import Path

import pytest

from benchfit.data import read_sweep
from benchfit.data.declared import declared_quantity

SAMPLES = Path(__file__).resolve().parents[1] / "sample_data"


@pytest.mark.parametrize("line,quantity", [
    ("Measurement;control-to-output, buck converter", "plant"),
    ("Measurement: loop gain T = -B/A", "loop"),
    ("Quantity=closed-loop gain", "closed"),          # holds "loop gain": closed is tried first
    ("Measured\toutput impedance", "impedance"),
    ("Measurement type: error amplifier", "compensator"),
])
def test_a_keyed_line_declares_its_quantity(line, quantity):
    assert declared_quantity(["Sweep export", line, "Points;401"]) == (quantity, line)


def test_free_text_and_other_keys_declare_nothing():
    # a title or a description is not a declaration ("open-loop gain" of an amplifier is
    # a plant to the loop); a key that does not name the measurement is not one either
    assert declared_quantity(["Loop gain, 3.3 V regulator", "open-loop gain, reference buffer"]) is None
    assert declared_quantity(["Instrument;plant-floor analyzer", "IF bandwidth;10 Hz"]) is None
    assert declared_quantity(["Measurement;sweep 3"]) is None
    assert declared_quantity([]) is None and declared_quantity(None) is None


def test_two_lines_that_disagree_declare_nothing():
    assert declared_quantity(["Measurement;loop gain", "Quantity;control-to-output"]) is None
    assert declared_quantity(["Measurement;loop gain", "Quantity;loop gain"])[0] == "loop"


def test_reader_takes_the_declared_quantity_unless_told(tmp_path):
    p = tmp_path / "plant.csv"
    p.write_text("Sweep export\nMeasurement;control-to-output, buck converter\n\n"
                 "Frequency (Hz);Gain (dB);Phase (deg)\n10;20;0\n100;19;-10\n1000;0;-90\n",
                 encoding="utf-8")
    r = read_sweep(p)
    assert r.quantity == "plant"
    assert r.meta["declared_quantity"] == {"quantity": "plant",
                                           "line": "Measurement;control-to-output, buck converter"}
    assert read_sweep(p, quantity="loop").quantity == "loop"      # --quantity wins
    assert read_sweep(SAMPLES / "buck_plant.csv").quantity == "plant"
    assert read_sweep(SAMPLES / "ldo_loop.csv").quantity == "unknown"   # free text only
