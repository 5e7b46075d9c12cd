"""The sweep reader: every dialect round-trips, every detection, every override."""

import io

import numpy as np
import pandas as pd
import pytest
from dialect_text import FORMS, sample_response, write_dialect

from benchfit.data import FrequencyResponse, read_sweep, write_sweep_csv


def _write(tmp_path, name, data):
    p = tmp_path / name
    p.write_bytes(data if isinstance(data, bytes) else data.encode("utf-8"))
    return p


def _check(resp, w):
    # Same numbers the printed digits stand for (float rounding only).
    np.testing.assert_allclose(resp.freq_hz, w.freq_hz, rtol=1e-12)
    np.testing.assert_allclose(resp.response, w.response, rtol=1e-9, atol=1e-15)


SEPS = {"comma": ",", "semicolon": ";", "tab": "\t", "space": " ", "spaces": "  "}
# a comma cannot be both separator and decimal mark
SEP_DEC = [(s, d) for s in SEPS for d in (".", ",") if not (s == "comma" and d == ",")]


@pytest.mark.parametrize("sep_name,decimal", SEP_DEC)
@pytest.mark.parametrize("header", ["paren", "bracket", "underscore", "unit_row", "none"])
def test_round_trip_separator_decimal_header(tmp_path, sep_name, decimal, header):
    sep = SEPS[sep_name]
    f, h = sample_response()
    w = write_dialect(f, h, sep=sep, decimal=decimal, header=header, freq_unit="kHz")
    resp = read_sweep(_write(tmp_path, "s.csv", w.data), **w.options)
    _check(resp, w)
    d = resp.meta["dialect"]
    assert d["decimal"] == decimal
    assert d["separator"] == {",": "comma", ";": "semicolon", "\t": "tab"}.get(sep, "whitespace")
    assert d["freq_unit"] == "kHz"


@pytest.mark.parametrize("form", sorted(FORMS))
@pytest.mark.parametrize("unit", ["Hz", "kHz", "MHz"])
def test_round_trip_forms_and_units(tmp_path, form, unit):
    f, h = sample_response()
    w = write_dialect(f, h, sep=";", decimal=",", header="paren", freq_unit=unit, form=form)
    resp = read_sweep(_write(tmp_path, "s.csv", w.data))
    _check(resp, w)
    d = resp.meta["dialect"]
    assert d["data_form"] == ("re_im" if form == "re_im" else "mag_phase")
    if form != "re_im":
        assert d["mag_form"] == {"db": "db", "lin": "linear"}[FORMS[form][0]]
        assert d["phase_form"] == FORMS[form][1]
    assert resp.meta["warnings"] == []


@pytest.mark.parametrize("crlf,bom,comments,metadata,descending", [
    (True, False, False, False, False), (False, True, False, False, False),
    (True, True, True, True, True), (False, False, True, False, True),
    (False, False, False, True, False),
])
def test_round_trip_line_ends_bom_comments_order(tmp_path, crlf, bom, comments, metadata, descending):
    f, h = sample_response()
    w = write_dialect(f, h, sep="\t", header="unit_row", crlf=crlf, bom=bom, comments=comments,
                      metadata=metadata, descending=descending)
    resp = read_sweep(_write(tmp_path, "s.txt", w.data))
    _check(resp, w)
    assert resp.meta["dialect"]["order"] == ("descending (sorted)" if descending else "ascending")


def test_table_matches_pandas(tmp_path):
    # reference: pandas' CSV parser (read_csv with the separator and decimal mark given
    # explicitly) must see the same numbers our sniffing reader finds on its own.
    f, h = sample_response(101)
    w = write_dialect(f, h, sep=";", decimal=",", header="paren", form="re_im", metadata=True)
    p = _write(tmp_path, "s.csv", w.data)
    ref = pd.read_csv(io.BytesIO(w.data), sep=";", decimal=",", skiprows=4)
    resp = read_sweep(p)
    np.testing.assert_allclose(resp.freq_hz, ref.iloc[:, 0].to_numpy(), rtol=1e-15)
    np.testing.assert_allclose(resp.response.real, ref.iloc[:, 1].to_numpy(), rtol=1e-15)
    np.testing.assert_allclose(resp.response.imag, ref.iloc[:, 2].to_numpy(), rtol=1e-15)


def test_wrapped_phase_is_unwrapped_in_the_view(tmp_path):
    f, h = sample_response(201)
    w = write_dialect(f, h, header="paren")
    resp = read_sweep(_write(tmp_path, "s.csv", w.data))
    printed = np.array([float(line.split(",")[2]) for line in w.data.decode().splitlines()[1:]])
    assert printed.min() > -180.001 and printed.max() > 0  # the file's phase is wrapped
    ph = resp.phase_deg
    assert np.max(np.abs(np.diff(ph))) < 60  # the view is continuous
    np.testing.assert_allclose(ph, np.degrees(np.unwrap(np.angle(h))), atol=0.01)
    assert ph[-1] < -270


def test_duplicate_frequencies_are_averaged_with_warning(tmp_path):
    text = "freq_hz,re,im\n10,1,0\n20,2,2\n20,4,0\n30,3,1\n"
    resp = read_sweep(_write(tmp_path, "d.csv", text))
    np.testing.assert_allclose(resp.freq_hz, [10, 20, 30])
    np.testing.assert_allclose(resp.response, [1, 3 + 1j, 3 + 1j])
    assert any("more than once" in x for x in resp.meta["warnings"])


def test_out_of_order_sweep_sorted_with_warning(tmp_path):
    resp = read_sweep(_write(tmp_path, "o.csv", "freq_hz,re,im\n20,2,0\n10,1,0\n30,3,0\n"))
    np.testing.assert_allclose(resp.response.real, [1, 2, 3])
    assert any("out of order" in x for x in resp.meta["warnings"])


def test_side_by_side_traces_pick_by_number_and_name(tmp_path):
    text = ("Frequency (Hz),Gain A (dB),Phase A (deg),Gain B (dB),Phase B (deg)\n"
            "10,0,0,20,-90\n100,-20,-45,0,-180\n")
    p = _write(tmp_path, "t.csv", text)
    first = read_sweep(p)
    assert first.meta["dialect"]["traces"] == ["a", "b"]
    assert any("2 traces" in x for x in first.meta["warnings"])
    np.testing.assert_allclose(first.mag_db, [0, -20], atol=1e-12)
    for pick in (2, "2", "B", "b"):
        second = read_sweep(p, trace=pick)
        np.testing.assert_allclose(second.mag_db, [20, 0], atol=1e-12)
        assert second.meta["warnings"] == []


def test_stacked_traces_pick_by_title(tmp_path):
    text = ("Trace: light load\nFreq/Hz\tRe\tIm\n10\t1\t0\n20\t1\t0\n\n"
            "Trace: heavy load\nFreq/Hz\tRe\tIm\n10\t2\t0\n20\t2\t0\n30\t2\t0\n")
    p = _write(tmp_path, "s.tsv", text)
    assert len(read_sweep(p)) == 2
    heavy = read_sweep(p, trace="heavy")
    assert len(heavy) == 3 and heavy.response[0] == 2
    with pytest.raises(Exception, match="no trace matches"):
        read_sweep(p, trace="medium")


def test_separate_frequency_column_per_trace(tmp_path):
    text = "f1 (Hz);mag1 (dB);ph1 (deg);f2 (Hz);mag2 (dB);ph2 (deg)\n1;0;0;2;6;0\n3;0;0;4;6;0\n"
    resp = read_sweep(_write(tmp_path, "f.csv", text), trace=2)
    np.testing.assert_allclose(resp.freq_hz, [2, 4])


def test_columns_override_header_and_skip(tmp_path):
    text = "idx,a,b,c\n1,10,-6,-90\n2,20,-12,-180\n"
    resp = read_sweep(_write(tmp_path, "c.csv", text), columns="skip,freq,db,deg")
    np.testing.assert_allclose(resp.freq_hz, [10, 20])
    np.testing.assert_allclose(resp.response, [10 ** (-6 / 20) * -1j, -(10 ** (-12 / 20))], atol=1e-12)


def test_overrides_freq_unit_mag_phase(tmp_path):
    text = "Freq,Gain,Phase\n1,2,0.5\n2,1,1.0\n"
    p = _write(tmp_path, "o.csv", text)
    auto = read_sweep(p)
    assert auto.meta["dialect"]["freq_unit"] == "Hz (assumed)"
    assert auto.meta["dialect"]["mag_form"] == "linear"  # no unit, nothing negative
    assert auto.meta["dialect"]["phase_form"] == "rad"  # no unit, within ±π
    assert len(auto.meta["warnings"]) == 2
    r = read_sweep(p, freq_unit="kHz", mag="db", phase="deg")
    np.testing.assert_allclose(r.freq_hz, [1e3, 2e3])
    np.testing.assert_allclose(r.mag_db, [2, 1])
    np.testing.assert_allclose(np.degrees(np.angle(r.response)), [0.5, 1.0])
    assert r.provenance.settings == {"freq_unit": "kHz", "mag": "db", "phase": "deg"}
    assert r.provenance.step == "read_sweep" and r.provenance.sources == (str(p),)


def test_negative_gain_without_unit_is_db(tmp_path):
    r = read_sweep(_write(tmp_path, "g.csv", "f,gain,phase (deg)\n1,-3,0\n2,3,0\n"))
    assert r.meta["dialect"]["mag_form"] == "db"
    np.testing.assert_allclose(r.mag_db, [-3, 3])


def test_db_that_looks_linear_warns(tmp_path):
    r = read_sweep(_write(tmp_path, "l.csv", "f,Gain (dB),Phase (deg)\n1,10,0\n2,1,0\n3,0.001,0\n"))
    assert any("looks linear" in x for x in r.meta["warnings"])


def test_name_forms_seen_in_exports(tmp_path):
    # camel-case Touchstone-like names, ISO quantity/unit names, degree sign in Latin-1
    text = "f/MHz\tdB(S21)\tangS21\n1\t-1\t10\n2\t-2\t20\n"
    r = read_sweep(_write(tmp_path, "n.txt", text))
    np.testing.assert_allclose(r.freq_hz, [1e6, 2e6])
    assert r.meta["dialect"]["mag_form"] == "db"
    latin = "Frequency (Hz);Gain (dB);Phase (\xb0)\n10;1,5;-10,5\n20;1;-20\n".encode("latin-1")
    r = read_sweep(_write(tmp_path, "latin.csv", latin))
    assert r.meta["dialect"]["phase_form"] == "deg"
    np.testing.assert_allclose(np.degrees(np.angle(r.response)), [-10.5, -20])


def test_quoted_cells_and_trailing_separator(tmp_path):
    text = '"Frequency (Hz)","Re","Im",\n"10","1.5","0.5",\n"20","2.5","-0.5",\n'
    r = read_sweep(_write(tmp_path, "q.csv", text))
    np.testing.assert_allclose(r.response, [1.5 + 0.5j, 2.5 - 0.5j])


def test_weight_stddev_coherence_columns(tmp_path):
    text = "Frequency,Gain (dB),Phase (deg),Coherence,StdDev\n10,0,0,0.9,0.1\n20,0,0,0.8,0.2\n"
    r = read_sweep(_write(tmp_path, "w.csv", text))
    np.testing.assert_allclose(r.coherence, [0.9, 0.8])
    np.testing.assert_allclose(r.stddev, [0.1, 0.2])


def test_impedance_columns_set_quantity(tmp_path):
    r = read_sweep(_write(tmp_path, "z.csv", "Frequency [Hz],Z real [Ohm],Z imag [Ohm]\n1,1,0\n2,1,1\n"))
    assert r.quantity == "impedance"
    assert read_sweep(tmp_path / "z.csv", quantity="plant").quantity == "plant"


def test_canonical_file_recognised(tmp_path):
    f, h = sample_response()
    src = FrequencyResponse(freq_hz=f, response=h, quantity="loop", meta={"note": "x"})
    p = write_sweep_csv(src, tmp_path / "c.csv")
    r = read_sweep(p)
    np.testing.assert_allclose(r.response, h, rtol=1e-12)
    assert r.quantity == "loop" and r.meta["dialect"]["format"] == "benchfit canonical CSV"
    assert read_sweep(p, quantity="plant").quantity == "plant"


def test_content_decides_not_the_name(tmp_path):
    # a Touchstone file with a .txt name and a table with a .s2p-free odd name
    ts = _write(tmp_path, "looks_like_text.txt", "! c\n# Hz S RI R 50\n1 0.5 0 0.9 0.1 0 0 0.2 0\n"
                                                 "2 0.5 0 0.8 0.2 0 0 0.2 0\n")
    r = read_sweep(ts)
    assert r.meta["dialect"]["format"] == "touchstone v1"
    np.testing.assert_allclose(r.response, [0.9 + 0.1j, 0.8 + 0.2j])


def test_meta_dialect_and_columns_recorded(tmp_path):
    f, h = sample_response()
    w = write_dialect(f, h, sep=";", decimal=",", header="paren", metadata=True)
    r = read_sweep(_write(tmp_path, "m.csv", w.data))
    d = r.meta["dialect"]
    for key in ("separator", "decimal", "header", "freq_unit", "mag_form", "phase_form", "header_line"):
        assert key in d
    assert d["header_line"] == 5 and d["first_data_line"] == 6
    assert [c["role"] for c in r.meta["columns"]] == ["freq", "mag", "phase"]
    assert "Instrument: simulated analyzer" in r.meta["notes"]
    back = FrequencyResponse.from_dict(r.to_dict())  # meta survives the JSON form
    assert back.meta["dialect"] == d


def test_large_file_reads(tmp_path):
    # 100k lines read whole (speed is measured in benchmarks/read_sweep.py, not here)
    f = np.logspace(0, 7, 100_000)
    h = 1 / (1 + 1j * f / 1e3)
    w = write_dialect(f, h, sep=";", decimal=",", header="paren", form="re_im")
    r = read_sweep(_write(tmp_path, "big.csv", w.data))
    assert len(r) == 100_000
    np.testing.assert_allclose(r.response[[0, -1]], w.response[[0, -1]], rtol=1e-12)


def test_utf16_and_more_name_forms(tmp_path):
    text = "F\t|Z| (Ohm)\targ (deg)\r\n10\t2\t-90\r\n20\t1\t-90\r\n"
    r = read_sweep(_write(tmp_path, "u16.txt", text.encode("utf-16")))
    np.testing.assert_allclose(r.response, [-2j, -1j], atol=1e-12)
    assert r.quantity == "impedance" and r.meta["dialect"]["mag_form"] == "linear"


def test_fewer_column_words_than_columns(tmp_path):
    text = "1;0;0;99\n2;-6;-90;99\n"
    r = read_sweep(_write(tmp_path, "h.csv", text), columns="freq,db,deg")
    np.testing.assert_allclose(r.mag_db, [0, -6], atol=1e-12)


def test_iso_quantity_slash_unit_names(tmp_path):
    text = "Frequency/kHz;Magnitude/dB;Phase/°\n1;-3;-45\n2;-7;-63,4\n"
    r = read_sweep(_write(tmp_path, "iso.csv", text))
    np.testing.assert_allclose(r.freq_hz, [1e3, 2e3])
    np.testing.assert_allclose(r.mag_db, [-3, -7], atol=1e-12)
    assert r.meta["dialect"]["columns"] == ["Frequency/kHz", "Magnitude/dB", "Phase/°"]
