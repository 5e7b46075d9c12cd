"""The row rule of benchfit/data/rows.py, on the files issue 21 found losing rows.

Every row of the data block is read, or the error names the first row that
could not be (file, line, what was expected), or, with ``skip_bad_rows``, the
rows left out are counted and listed in ``meta["skipped_rows"]``, a warning and
the provenance.  A repeated header (two traces) and an up-and-down sweep
(averaged repeats) keep their meaning.
"""

import numpy as np
import pytest

from benchfit.data import read_sweep
from benchfit.data.summary import read_any, summary
from benchfit.errors import InputError

pytestmark = pytest.mark.filterwarnings("error::RuntimeWarning")

HEAD = "Frequency (Hz),Gain (dB),Phase (deg)"
F = np.logspace(1, 5, 101)
H = 1 / (1 + 1j * F / 1e3)


def _rows(fmt="{:.6g}", sep=","):
    return [sep.join([fmt.format(f), f"{20 * np.log10(abs(h)):.4f}", f"{np.degrees(np.angle(h)):.3f}"])
            for f, h in zip(F, H, strict=True)]


def _write(tmp_path, name, lines):
    p = tmp_path / name
    p.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return p


@pytest.mark.parametrize("sep", [";", "\t"])
def test_thousands_separators_are_read_not_lost(tmp_path, sep):
    # issue 21 item 3: '1,000.50' lost every row from 1 kHz up (40 of 101 read, rc 0)
    rows = [sep.join([f"{f:,.2f}", f"{20 * np.log10(abs(h)):.4f}", f"{np.degrees(np.angle(h)):.3f}"])
            for f, h in zip(F, H, strict=True)]
    r = read_sweep(_write(tmp_path, "t.csv", [HEAD.replace(",", sep), *rows]))
    assert len(r) == 101
    np.testing.assert_allclose(r.freq_hz, [float(f"{f:.2f}") for f in F], rtol=1e-12)
    assert r.meta["dialect"]["thousands"] == ","


def test_quoted_thousands_in_a_comma_file(tmp_path):
    rows = [f'"{f:,.2f}",{20 * np.log10(abs(h)):.4f},{np.degrees(np.angle(h)):.3f}'
            for f, h in zip(F, H, strict=True)]
    r = read_sweep(_write(tmp_path, "q.csv", [HEAD, *rows]))
    assert len(r) == 101 and r.f_max_hz == pytest.approx(1e5)


def test_decimal_comma_with_point_grouping(tmp_path):
    rows = ["1.000,5;-3,0;-45,0", "2.000,5;-6,0;-60,0", "999,5;-1,0;-30,0"]
    r = read_sweep(_write(tmp_path, "e.csv", ["Frequenz (Hz);Gain (dB);Phase (deg)", *rows]))
    np.testing.assert_allclose(r.freq_hz, [999.5, 1000.5, 2000.5])


def test_decimal_comma_file_with_three_decimals_is_not_read_as_grouping(tmp_path):
    # '12,345' is 12.345 in a decimal-comma file, never 12345: grouping must not win the sniff
    rows = ["10,125;-3,210;-45,125", "20,250;-6,420;-60,250", "30,375;-9,630;-75,375"]
    r = read_sweep(_write(tmp_path, "d.csv", ["Freq (Hz);Gain (dB);Phase (deg)", *rows]))
    np.testing.assert_allclose(r.freq_hz, [10.125, 20.25, 30.375])
    assert "thousands" not in r.meta["dialect"]


def test_text_line_among_the_rows_is_an_error_naming_it(tmp_path):
    # issue 21 item 3: 'Marker 1: 5 kHz' stopped the read after 50 of 101 rows, rc 0
    rows = _rows()
    p = _write(tmp_path, "m.csv", [HEAD, *rows[:50], "Marker 1: 5 kHz", *rows[50:]])
    with pytest.raises(InputError) as e:
        read_sweep(p)
    assert e.value.line == 52 and "Marker 1: 5 kHz" in str(e.value) and "m.csv" in str(e.value)
    assert "--skip-bad-rows" in str(e.value)


def test_text_line_skipped_on_request_is_counted_listed_and_in_provenance(tmp_path):
    rows = _rows()
    p = _write(tmp_path, "m.csv", [HEAD, *rows[:50], "Marker 1: 5 kHz", *rows[50:]])
    r = read_sweep(p, skip_bad_rows=True)
    assert len(r) == 101  # rows read + rows skipped == rows written
    assert [s["line"] for s in r.meta["skipped_rows"]] == [52]
    assert r.meta["dialect"]["rows_skipped"] == 1
    assert any("skipped 1 row" in w and "52" in w for w in r.meta["warnings"])
    assert r.provenance.settings["skipped_rows"] == [52]
    s = summary(read_any(p, skip_bad_rows=True))
    assert s["skipped_rows"][0]["text"] == "Marker 1: 5 kHz"


@pytest.mark.parametrize("bad,line,column", [
    ("#N/A,#N/A,#N/A", 32, "Frequency (Hz)"),
    ("{f},#N/A,#N/A", 32, "Gain (dB)"),
    ("{f},nan,-3", 32, "Gain (dB)"),
    ("9.91E+37,-3,45", 32, "Frequency (Hz)"),
    ("{f},9.9E37,45", 32, "Gain (dB)"),
    ("{f},-3,-9.91e37", 32, "Phase (deg)"),
    ("{f},-3", 32, None),
])
def test_rows_that_cannot_be_read(tmp_path, bad, line, column):
    # issue 21 items 3 and 4: '#N/A' rows vanished; the SCPI-1999 not-a-number marker 9.91E37
    # (and 9.9E37 for infinity; SCPI-1999 Vol. 1 section 7.2.1, from memory) was read as data
    rows = _rows()
    rows[30] = bad.format(f=rows[30].split(",")[0])
    p = _write(tmp_path, "b.csv", [HEAD, *rows])
    with pytest.raises(InputError) as e:
        read_sweep(p)
    assert e.value.line == line and e.value.column == column, str(e.value)
    r = read_sweep(p, skip_bad_rows=True)
    assert len(r) == 100 and r.meta["skipped_rows"][0]["line"] == line
    assert r.f_max_hz == pytest.approx(1e5)


def test_scpi_marker_never_becomes_a_frequency(tmp_path):
    # issue 21 item 4: "10 Hz .. 9.91e+28 GHz"
    rows = _rows()
    rows[-1] = "9.91E+37,-3,45"
    r = read_sweep(_write(tmp_path, "s.csv", [HEAD, *rows]), skip_bad_rows=True)
    assert r.f_max_hz < 1e6


def test_broken_row_under_the_header_belongs_to_the_block(tmp_path):
    rows = _rows()
    p = _write(tmp_path, "u.csv", [HEAD, "#N/A,#N/A,#N/A", *rows])
    with pytest.raises(InputError) as e:
        read_sweep(p)
    assert e.value.line == 2
    assert len(read_sweep(p, skip_bad_rows=True)) == 101


def test_broken_rows_at_the_end_are_rows(tmp_path):
    rows = _rows()
    p = _write(tmp_path, "e.csv", [HEAD, *rows, "1.2e5,#N/A,#N/A", "End of data"])
    with pytest.raises(InputError) as e:
        read_sweep(p)
    assert e.value.line == 103
    r = read_sweep(p, skip_bad_rows=True)
    assert len(r) == 101 and "End of data" in r.meta["notes"]


def test_non_positive_frequency_is_a_row_that_cannot_be_read(tmp_path):
    rows = _rows()
    p = _write(tmp_path, "z.csv", [HEAD, "0,0,0", *rows])
    with pytest.raises(InputError, match="line 2, column Frequency .Hz.: frequency 0 Hz is not positive"):
        read_sweep(p)
    assert read_sweep(p, skip_bad_rows=True).meta["skipped_rows"][0]["line"] == 2


def test_repeated_header_is_still_two_traces(tmp_path):
    rows = _rows()
    p = _write(tmp_path, "two.csv", [HEAD, *rows[:40], HEAD, *rows[40:]])
    r = read_sweep(p)
    assert len(r) == 40 and len(r.meta["dialect"]["traces"]) == 2
    assert len(read_sweep(p, trace=2)) == 61


def test_up_and_down_sweep_is_still_averaged_quietly(tmp_path):
    rng = np.random.default_rng(1)
    rows = _rows()
    down = []
    for r in rows[::-1]:
        f, db, deg = r.split(",")
        down.append(f"{f},{float(db) + rng.normal(0, 0.01):.4f},{float(deg) + rng.normal(0, 0.05):.3f}")
    r = read_sweep(_write(tmp_path, "ud.csv", [HEAD, *rows, *down]))
    assert len(r) == 101
    assert any("agree within the sweep's scatter" in w for w in r.meta["warnings"])
    assert not any("disagree" in w for w in r.meta["warnings"])


def test_repeats_that_disagree_far_beyond_the_noise_are_warned_with_lines(tmp_path):
    # issue 21 item 4: repeats +10 dB, +90 degrees off were averaged with the quiet note
    rows = _rows()
    f, db, deg = rows[60].split(",")
    p = _write(tmp_path, "dis.csv", [HEAD, *rows, f"{f},{float(db) + 10:.4f},{float(deg) + 90:.3f}"])
    r = read_sweep(p)
    w = [x for x in r.meta["warnings"] if "disagree" in x]
    assert w and "lines 62, 103" in w[0] and "10 dB" in w[0]


@pytest.mark.parametrize("name,column", [("Frequency (furlongs)", "Frequency (furlongs)"),
                                         ("Freq [rad/s]", "Freq [rad/s]")])
def test_frequency_unit_not_understood_is_an_error_naming_the_column(tmp_path, name, column):
    p = _write(tmp_path, "u.csv", [HEAD.replace("Frequency (Hz)", name), *_rows()])
    with pytest.raises(InputError) as e:
        read_sweep(p)
    assert e.value.column == column and "not a frequency unit" in str(e.value)
    assert len(read_sweep(p, freq_unit="Hz")) == 101  # the override says what it is


def test_phase_unit_not_understood_is_an_error_naming_the_column(tmp_path):
    p = _write(tmp_path, "g.csv", [HEAD.replace("deg", "grad"), *_rows()])
    with pytest.raises(InputError) as e:
        read_sweep(p)
    assert e.value.column == "Phase (grad)" and "not a phase unit" in str(e.value)
    assert len(read_sweep(p, phase="deg")) == 101


def test_radians_under_a_degrees_header_warn(tmp_path):
    rows = [f"{f:.6g},{20 * np.log10(abs(h)):.4f},{np.angle(h):.5f}" for f, h in zip(F, H, strict=True)]
    r = read_sweep(_write(tmp_path, "r.csv", [HEAD, *rows]))
    assert any("labelled degrees" in w for w in r.meta["warnings"])


def test_degrees_under_a_radians_header_warn(tmp_path):
    r = read_sweep(_write(tmp_path, "d.csv", [HEAD.replace("deg", "rad"), *_rows()]))
    assert any("labelled radians" in w for w in r.meta["warnings"])


def test_honest_degrees_do_not_warn(tmp_path):
    r = read_sweep(_write(tmp_path, "ok.csv", [HEAD, *_rows()]))
    assert r.meta["warnings"] == []


def test_long_cell_and_wide_header_are_cut_in_messages(tmp_path):
    # issue 21 item 10: an error quoted a whole 1 MB cell or a 20 000-column header
    rows = _rows()
    rows[5] = rows[5].split(",")[0] + "," + "x" * 50_000 + ",1"
    with pytest.raises(InputError) as e:
        read_sweep(_write(tmp_path, "c.csv", [HEAD, *rows]))
    assert len(str(e.value)) < 400 and "50000 characters" in str(e.value)
    wide = ",".join(f"name{k}" for k in range(5000))
    with pytest.raises(InputError) as e:
        read_sweep(_write(tmp_path, "w.csv", [wide, ",".join(["1"] * 5000), ",".join(["2"] * 5000)]))
    assert len(str(e.value)) < 600 and "more" in str(e.value)


def test_a_line_without_end_is_refused_early(tmp_path):
    # issue 21 item 7: a 10 MB file of one line grew inspect to 7 GB; the size check
    # streams the file and refuses the line before anything is parsed
    p = tmp_path / "one.csv"
    p.write_bytes(b"1," * 5_000_000)
    with pytest.raises(InputError, match="one.csv, line 1: line longer than 64 KiB"):
        read_sweep(p)


def test_deeply_nested_meta_line_is_one_error(tmp_path):
    # issue 21 item 6: RecursionError from json
    p = tmp_path / "n.csv"
    p.write_text("# benchfit sweep v1\n# meta: " + "[" * 20_000 + "]" * 20_000
                 + "\nfreq_hz,re,im\n10,1,0\n20,1,0\n")
    with pytest.raises(InputError, match="n.csv, line 2"):
        read_sweep(p)
    p.write_text("# benchfit sweep v1\n# meta: " + '{"a":' * 500 + "1" + "}" * 500
                 + "\nfreq_hz,re,im\n10,1,0\n20,1,0\n")
    with pytest.raises(InputError, match="nests deeper"):
        read_sweep(p)


def test_canonical_file_refuses_the_scpi_marker(tmp_path):
    p = tmp_path / "c.csv"
    p.write_text("# benchfit sweep v1\nfreq_hz,re,im\n10,1,0\n20,9.91e37,0\n")
    with pytest.raises(InputError, match="c.csv, line 4.*not-a-number marker"):
        read_sweep(p)


def test_a_table_of_another_kind_after_the_data_is_named_not_read(tmp_path):
    rows = _rows()
    p = _write(tmp_path, "mk.csv", [HEAD, *rows, "", "Markers", "Name,Freq,Value", "M1,1000,-2.5"])
    r = read_sweep(p)
    assert len(r) == 101
    assert any("3 lines of text after the last row (from line 104" in w for w in r.meta["warnings"])


def test_unquoted_thousands_in_a_comma_file_are_an_error_that_says_so(tmp_path):
    p = _write(tmp_path, "tc.csv", [HEAD, "100,-1,-5", "999,-2,-10", "1,000.5,-3,-20"])
    with pytest.raises(InputError, match="line 4: 4 cells, expected 3.*thousands separator"):
        read_sweep(p)


def test_cli_skip_bad_rows_lists_them(tmp_path, capsys):
    import json

    from benchfit.cli import main

    rows = _rows()
    p = _write(tmp_path, "m.csv", [HEAD, *rows[:50], "Marker 1: 5 kHz", *rows[50:]])
    assert main(["inspect", str(p), "--json"]) == 2
    assert "line 52" in capsys.readouterr().err
    assert main(["inspect", str(p), "--skip-bad-rows", "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert out["points"] == 101 and [s["line"] for s in out["skipped_rows"]] == [52]
