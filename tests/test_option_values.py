"""The one option-value parser (benchfit.cli.values): unit classes, ranges, empty values.

SI prefixes and unit symbols as the SI Brochure (9th edition, 2019, tables 7 and 8) writes
them: k = 1e3, M = 1e6, m = 1e-3, u/µ = 1e-6, n = 1e-9, p = 1e-12; Hz, s, V, A, Ω, F.
"""

import argparse

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from benchfit.cli import build_parser, main
from benchfit.cli.values import (
    ANGLE,
    CAPACITANCE,
    CURRENT,
    FREQUENCY,
    NON_NEGATIVE,
    NUMBER,
    PERCENT,
    POSITIVE,
    RESISTANCE,
    SEED,
    TIME,
    UNITS,
    VOLTAGE,
    Range,
    band,
    count,
    pair,
    parse_count,
    parse_range,
    parse_value,
    text,
    value,
)
from benchfit.errors import InputError


@pytest.mark.parametrize("given,unit,expected", [
    ("10k", FREQUENCY, 1e4), ("2.5MHz", FREQUENCY, 2.5e6), ("20 kHz", FREQUENCY, 2e4),
    ("1e6", FREQUENCY, 1e6), ("150ns", TIME, 150e-9), ("2u", TIME, 2e-6), ("2µs", TIME, 2e-6),
    ("1ms", TIME, 1e-3), ("3s", TIME, 3.0), ("100mV", VOLTAGE, 0.1), ("0.1", VOLTAGE, 0.1),
    ("500mA", CURRENT, 0.5), ("4.7kohm", RESISTANCE, 4.7e3), ("10kΩ", RESISTANCE, 1e4),
    ("1meg", RESISTANCE, 1e6), ("100pF", CAPACITANCE, 100e-12), ("4.7n", CAPACITANCE, 4.7e-9),
    ("45deg", ANGLE, 45.0), ("5%", PERCENT, 5.0), ("-3", NUMBER, -3.0), (".5", NUMBER, 0.5),
])
def test_values_in_their_unit(given, unit, expected):
    assert parse_value(given, "--x", unit, Range()) == pytest.approx(expected, rel=1e-12)


@pytest.mark.parametrize("given,unit,needle", [
    ("20kHz", TIME, "is a frequency (Hz); expected a time in s"),
    ("20kHz", VOLTAGE, "is a frequency (Hz); expected a voltage in V"),
    ("2us", FREQUENCY, "is a time (s); expected a frequency"),
    ("10k", ANGLE, "unit 'k' not understood"),      # no prefixes on degrees
    ("5mA", VOLTAGE, "is a current (A)"),
    ("10mhz", FREQUENCY, "write mHz (millihertz) or MHz"),
    ("1_000", NUMBER, "not understood"), ("infinity", NUMBER, "not understood"),
    ("nan", NUMBER, "is not a number"), ("", NUMBER, "empty value"), ("   ", TIME, "empty value"),
    ("5 furlongs", FREQUENCY, "unit 'furlongs' not understood"),
])
def test_values_refused(given, unit, needle):
    with pytest.raises(InputError, match="--x") as e:
        parse_value(given, "--x", unit, Range())
    assert needle in str(e.value)


def test_ranges_and_infinity():
    assert parse_value("0", "--x", TIME, NON_NEGATIVE) == 0.0
    for bad, rng, needle in (("0", POSITIVE, "above 0"), ("-1", NON_NEGATIVE, "at least 0"),
                             ("inf", Range(), "finite"), ("1e400", Range(), "finite"),
                             ("1e308G", Range(), "too large"), ("101", Range(le=100), "at most 100")):
        with pytest.raises(InputError, match=needle):
            parse_value(bad, "--x", NUMBER, rng)
    assert parse_value("inf", "--x", NUMBER, Range(infinite=True)) == float("inf")


def test_long_values_are_cut_in_the_message():
    with pytest.raises(InputError) as e:
        parse_value("x" * 100_000, "--x", NUMBER)
    assert len(str(e.value)) < 200 and "100000 characters" in str(e.value)


def test_counts_words_ranges_and_pairs():
    assert parse_count("3", 0, 3) == 3 and parse_count("AUTO", 1, words=("auto",)) == "auto"
    for bad in ("4", "-1", "1.5", "1e3", "", "three"):
        with pytest.raises(ValueError):
            parse_count(bad, 0, 3)
    assert parse_range("100:1M", "--band", FREQUENCY) == (100.0, 1e6)
    assert parse_range(":10k", "--band", FREQUENCY) == (None, 1e4)
    for bad in ("", ":", "100", "1k:2us"):
        with pytest.raises(InputError, match="--band"):
            parse_range(bad, "--band", FREQUENCY)
    with pytest.raises(InputError, match="both given"):
        parse_range("30k:", "--divider", RESISTANCE, open_ends=False)


def test_argparse_types_report_the_option(capsys):
    p = argparse.ArgumentParser(exit_on_error=False)
    p.add_argument("--delay", type=value(TIME, NON_NEGATIVE, words=("auto", "none")))
    p.add_argument("--seed", type=SEED)
    p.add_argument("--band", type=band)
    p.add_argument("--div", type=pair(RESISTANCE))
    p.add_argument("--n", type=count(1))
    p.add_argument("--name", type=text)
    ns = p.parse_args(["--delay", "None", "--seed", "7", "--band", "1k:", "--div", "30k:10k",
                       "--n", "2", "--name", "CH1"])
    assert (ns.delay, ns.seed, ns.band, ns.div, ns.n, ns.name) == ("none", 7, (1e3, None),
                                                                   (3e4, 1e4), 2, "CH1")
    for argv in (["--seed", "-1"], ["--delay", "20kHz"], ["--name", ""], ["--n", "0"]):
        with pytest.raises(argparse.ArgumentError):
            p.parse_args(argv)


@pytest.mark.parametrize("argv,needle", [
    (["margins", "x.csv", "--delay", "20kHz"], "--delay: '20kHz' is a frequency (Hz)"),
    (["capture", "--simulate", "x.csv", "--level", "20kHz"], "--level: '20kHz' is a frequency"),
    (["fit", "x.csv", "--band", ""], "--band: empty value"),
    (["design", "x.csv", "--divider", ""], "--divider: empty value"),
    (["design", "x.csv", "--tolerance", ""], "--tolerance: empty value"),
    (["design", "x.csv", "--r-in", ""], "--r-in: empty value"),
    (["step", "x.csv", "--load-step", "--current-step", "0"], "--current-step: '0'"),
    (["step", "x.csv", "--load-step", "--current-step", "inf"], "--current-step: 'inf'"),
    (["step", "x.csv", "--load-step", "--current-step", "-1"], "--current-step: '-1'"),
    (["design", "x.csv", "--seed", "-1"], "--seed: '-1'"),
    (["check", "--design", "d.json", "--seed", "-1"], "--seed: '-1'"),
    (["capture", "--simulate", "x.csv", "--seed", "-1"], "--seed: '-1'"),
    (["capture", "--simulate", "x.csv", "--sim-point-time", "inf"], "--sim-point-time: 'inf'"),
    (["capture", "--simulate", "x.csv", "-o", ""], "--output: empty value"),
])
def test_commands_refuse_bad_values_before_reading_anything(capsys, argv, needle):
    # x.csv does not exist: the value is refused while the command line is parsed
    assert main(argv) == 2
    err = capsys.readouterr().err
    assert err.startswith("benchfit: error: ") and err.count("\n") == 1 and needle in err, err


def _options():
    parser = build_parser()
    for name, sub in parser._subparsers._group_actions[0].choices.items():
        for action in sub._actions:
            if action.option_strings and action.nargs != 0 and action.dest != "help":
                yield name, action


def test_every_valued_option_goes_through_the_value_parser():
    """No option converts its value with a bare int/float (which ignore units and ranges), and
    every option that takes a value has a type from benchfit.cli.values or a fixed choice."""
    plain = []
    for command, action in _options():
        if action.type in (int, float):
            plain.append(f"{command} {action.option_strings[-1]}: type={action.type.__name__}")
        elif action.type is None and action.choices is None and action.dest not in ("title",):
            plain.append(f"{command} {action.option_strings[-1]}: no type")
        elif action.type is not None:
            assert action.type.__module__ == "benchfit.cli.values", (command, action.dest)
    assert not plain, plain

_PREFIXES = {"p": 1e-12, "n": 1e-9, "u": 1e-6, "m": 1e-3, "": 1.0, "k": 1e3, "M": 1e6, "G": 1e9}


@settings(max_examples=300, deadline=None)
@given(st.text(max_size=30), st.sampled_from((*UNITS, NUMBER)))
def test_any_text_is_a_value_or_one_input_error(text_, unit):
    try:
        x = parse_value(text_, "--x", unit, Range())
    except InputError as e:
        assert str(e).startswith("--x: ") and "\n" not in str(e) and len(str(e)) < 300
    else:
        assert x == x and abs(x) != float("inf")   # finite, never NaN


@settings(max_examples=300, deadline=None)
@given(st.floats(1e-6, 1e6, allow_nan=False), st.sampled_from(sorted(_PREFIXES)),
       st.sampled_from([u for u in UNITS if u.prefixes]))
def test_number_prefix_unit_round_trip(x, prefix, unit):
    text_ = f"{x!r}{prefix}{unit.spellings[0]}"
    assert parse_value(text_, "--x", unit, Range()) == pytest.approx(x * _PREFIXES[prefix], rel=1e-12)
    others = [u for u in UNITS if u is not unit and u.prefixes]
    with pytest.raises(InputError, match="expected " + others[0].name):
        parse_value(text_, "--x", others[0], Range())


def test_negative_values_with_units_reach_the_option_and_name_it_once(tmp_path, capsys):
    # "--delay -1u" was taken for an option ("expected one argument"), and a value the
    # option's own parser refused named the option twice ("--band: --band: ...")
    sweep = tmp_path / "t.csv"
    sweep.write_text("freq_hz,mag_db,phase_deg\n10,20,-90\n100,0,-100\n1000,-20,-120\n")
    for argv, needle in ((["margins", str(sweep), "--delay", "-1u"],
                          "benchfit: error: --delay: '-1u': expected a time at least 0 s"),
                         (["step", str(sweep), "--band", "200%"],
                          "benchfit: error: --band: '200%': expected a percentage below 100%")):
        rc = main(argv)
        err = capsys.readouterr().err.strip()
        assert rc == 2 and err == needle
