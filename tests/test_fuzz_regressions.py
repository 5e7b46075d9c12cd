"""Every failing example the fuzz campaigns found, kept so it stays fixed.

Each case names the reader, the damage and what used to happen.
"""

import pytest

from benchfit.data import read_sweep, read_trace
from benchfit.errors import InputError

CASES = [
    # read_sweep/read_trace: a UTF-16 byte-order mark followed by an odd number of bytes
    # raised UnicodeDecodeError from load_text (found by test_damaged_touchstone).
    ("utf16_odd_bytes", b"\xff\xfe!", "UTF-16"),
    ("utf16_be_truncated", b"\xfe\xff\x00", "UTF-16"),
]


@pytest.mark.parametrize("name,data,fragment", CASES, ids=[c[0] for c in CASES])
@pytest.mark.parametrize("reader", [read_sweep, read_trace], ids=["sweep", "trace"])
def test_regression(tmp_path, reader, name, data, fragment):
    p = tmp_path / f"{name}.csv"
    p.write_bytes(data)
    with pytest.raises(InputError) as e:
        reader(p)
    assert p.name in str(e.value) and fragment in str(e.value)


def test_trace_with_one_headerless_row(tmp_path):
    # read_trace: one row of numbers and no header hit steps.max() on an empty array
    # (ValueError from numpy; found by test_damaged_exports)
    p = tmp_path / "one.csv"
    p.write_bytes(b"1.0,2.0\n")
    with pytest.raises(InputError, match="one.csv.*sample-interval"):
        read_trace(p)


def test_trace_with_one_sample_names_the_file(tmp_path):
    # read_trace: TimeTrace's "at least 2 samples" error did not name the file
    p = tmp_path / "short.csv"
    p.write_bytes(b"Time (s),CH1 (V)\n0,1\n")
    with pytest.raises(InputError, match="short.csv"):
        read_trace(p)


def test_block_header_with_a_non_ascii_digit():
    # parse_block: '#\xb9' ('¹' passes str.isdigit) raised ValueError from int()
    # (found by test_random_bytes_as_block)
    from benchfit.bench.blocks import MalformedReply, parse_block

    with pytest.raises(MalformedReply, match="digit 1-9"):
        parse_block(b"#\xb9", "real32")


def test_profile_with_a_huge_integer(tmp_path):
    # load_profile_file: timeout_s = 10**400 raised OverflowError in float()
    # (found by test_damaged_profiles)
    from benchfit.bench.profile import SHIPPED_DIR, load_profile_file

    text = (SHIPPED_DIR / "generic-analyzer.toml").read_text(encoding="utf-8")
    p = tmp_path / "huge.toml"
    p.write_text(text.replace("timeout_s = 10.0", "timeout_s = " + "9" * 400), encoding="utf-8")
    with pytest.raises(InputError, match="huge.toml.*too large"):
        load_profile_file(p)


@pytest.mark.parametrize("body", [
    '{"kind": "plant_model", "zeros": true, "poles": [], "k": 1}',
    '{"kind": "plant_model", "zeros": [], "poles": [], "k": [1]}',
    '{"kind": "fit_result", "model": {"zeros": [], "poles": [], "k": 1}, "parameters": [1]}',
    '{"kind": "fit_result", "model": {"zeros": [], "poles": [], "k": 1}, "parameters": [], "stats": [1]}',
])
def test_damaged_model_json(tmp_path, body):
    # PlantModel/FitResult.from_json raised TypeError/ValueError (found by test_damaged_structure)
    from benchfit.fitting.model import PlantModel
    from benchfit.fitting.result import FitResult

    p = tmp_path / "m.json"
    p.write_text(body, encoding="utf-8")
    reader = FitResult.from_json if "fit_result" in body else PlantModel.from_json
    with pytest.raises(InputError, match="m.json"):
        reader(p)


@pytest.mark.parametrize("line", ['# provenance: {"settings": [1]}', '# provenance: {"parents": 5}',
                                  '# meta: [1, 2]'])
def test_canonical_csv_with_a_damaged_header_line(tmp_path, line):
    # read_sweep/read_trace of a canonical CSV: a provenance line holding valid JSON of the wrong
    # shape raised ValueError from Provenance.from_dict (found by test_damaged_canonical_csv_fuzz)
    p = tmp_path / "canon.csv"
    p.write_text(f"# benchfit sweep v1\n{line}\nfreq_hz,re,im\n10,1,0\n20,1,0\n", encoding="utf-8")
    with pytest.raises(InputError, match="canon.csv"):
        read_sweep(p)


def test_model_json_with_a_huge_integer(tmp_path):
    # PlantModel.from_json: a 400-digit integer in 'zeros' raised OverflowError in float()
    # (found by test_damaged_text_fuzz)
    from benchfit.fitting.model import PlantModel

    p = tmp_path / "m.json"
    p.write_text('{"kind": "plant_model", "zeros": [[' + "9" * 400 + ', 0]], "poles": [], "k": 1}')
    with pytest.raises(InputError, match="m.json.*zeros"):
        PlantModel.from_json(p)


@pytest.mark.parametrize("body", ["[" + "9" * 4301 + "]", "[" * 100_000 + "]" * 100_000])
def test_json_that_python_refuses_to_parse(tmp_path, body):
    # read_json: a 4301-digit integer raised ValueError (Python's int-string limit), not
    # JSONDecodeError (found by test_damaged_text_fuzz); deep nesting raises RecursionError
    from benchfit.fileio import read_json

    p = tmp_path / "x.json"
    p.write_text(body, encoding="utf-8")
    with pytest.raises(InputError, match="x.json.*not valid JSON"):
        read_json(p)


def test_sweep_cell_with_a_stray_quote_reads_like_the_dialect_says(tmp_path):
    # read_sweep: a last cell '0.00"' (a stray quote) failed numpy's float conversion but
    # passed the dialect's per-cell rule, so the slow path found no bad cell and re-raised
    # ValueError (found by test_damaged_tables_fuzz).  The dialect's rule strips quotes.
    p = tmp_path / "quote.txt"
    p.write_bytes(b"Frequency (Hz) Gain (dB) Phase (deg)\n1.0 0.0000 0.000\n2.0 0.0000 0.000\n"
                  b"5.0 0.0000 0.00\"\n")
    r = read_sweep(p)
    assert r.freq_hz.tolist() == [1.0, 2.0, 5.0]
    assert abs(r.response[-1] - 1.0) < 1e-12


def test_trace_row_with_a_stray_quote_after_the_exponent(tmp_path):
    # read_trace: a row "8.265196e-0'" after a block of numbers failed the data-line pattern
    # but every cell passed the lenient per-cell rule, so picking the bad cell raised
    # StopIteration (found by test_damaged_exports_fuzz).
    p = tmp_path / "scope.csv"
    body = "\n".join(["Sample interval,1.000000e-09", "Trigger point,0", "CH1",
                      "2.514604e-01", "-2.642097e-01", "1.280845e+00", "8.265196e-0'",
                      "-4.650062e+00"]) + "\n"
    p.write_text(body)
    with pytest.raises(InputError) as e:
        read_trace(p)
    assert "scope.csv" in str(e.value) and "8.265196e-0'" in str(e.value)


@pytest.mark.filterwarnings("error::RuntimeWarning")
def test_canonical_sweep_with_an_infinite_value_names_the_cell(tmp_path):
    # read_sweep (canonical CSV): an 'inf' in the im column printed numpy's "invalid value
    # encountered in multiply" before the FrequencyResponse check refused it (warnings seen
    # in the fuzz campaign's summary).  Now one InputError naming line and column, no warning.
    import numpy as np

    from benchfit.data import FrequencyResponse
    from benchfit.data.canonical import write_sweep_csv

    p = tmp_path / "sweep.csv"
    write_sweep_csv(FrequencyResponse(freq_hz=np.array([1.0, 2.0, 3.0]),
                                      response=np.array([1 + 1j, 2 + 0j, 3 - 1j])), p)
    lines = p.read_text().splitlines()
    last = lines[-1].split(",")
    last[2] = "inf"
    lines[-1] = ",".join(last)
    p.write_text("\n".join(lines) + "\n")
    with pytest.raises(InputError) as e:
        read_sweep(p)
    assert e.value.line == len(lines) and e.value.column == "im"


@pytest.mark.filterwarnings("error::RuntimeWarning")
def test_trace_with_a_sample_interval_that_overflows_the_time_axis(tmp_path):
    # read_trace: "Sample interval,1e308" with a few samples made t0 + dt·k overflow
    # (numpy RuntimeWarning, found by test_damaged_exports_fuzz); now an InputError.
    p = tmp_path / "scope.csv"
    p.write_text("Sample interval,1e308\nTrigger point,0\nCH1\n1.0\n2.0\n3.0\n")
    with pytest.raises(InputError) as e:
        read_trace(p)
    assert "scope.csv" in str(e.value) and "sample interval" in str(e.value)


@pytest.mark.filterwarnings("error::RuntimeWarning")
def test_block_with_a_signalling_nan_reads_without_a_warning():
    # bench.blocks.parse_block: a float32 signalling NaN raised numpy's "invalid value
    # encountered in cast" (found by test_damaged_blocks_fuzz).  IEEE 754 keeps it a NaN.
    import numpy as np

    from benchfit.bench.blocks import build_block, parse_block

    data = build_block(np.array([1.0, 2.0], dtype=np.float32), "real32")
    data = data[:-4] + b"\x7f\x80\x00\x01"  # big-endian float32 signalling NaN
    out = parse_block(data, "real32")
    assert out[0] == 1.0 and np.isnan(out[1])
