"""Limits files: parsing, errors that name the key, and judging hand-made rows."""

import math

import pytest

from benchfit.batch.limits import Limits, Window, judge, parse_limits, read_limits
from benchfit.errors import InputError

GOOD = """
[margins]
min_phase_margin_deg = 45
min_gain_margin_db = 6
crossover_hz = [20e3, 60e3]
require_stable = true

[fit]
max_rms_db = 1.0

[parameters]
f_esr_hz = { min = 15e3, max = 80e3 }
k = [0.5, ""]
"""


def test_parse_all_keys():
    lim = parse_limits(GOOD, "lim.toml")
    assert lim.min_phase_margin_deg == 45.0
    assert lim.min_gain_margin_db == 6.0
    assert lim.crossover_hz == Window(20e3, 60e3)
    assert lim.require_stable is True
    assert lim.max_rms_db == 1.0
    assert lim.parameters == {"f_esr_hz": Window(15e3, 80e3), "k": Window(0.5, None)}
    assert Limits.from_dict(lim.to_dict()).to_dict() == lim.to_dict()


@pytest.mark.parametrize("text,key,line", [
    ("[margins]\nmin_phase_margin = 45\n", "margins.min_phase_margin", 2),
    ("[margin]\nmin_phase_margin_deg = 45\n", "'margin'", 1),
    ("[fit]\nmax_rms = 1\n", "fit.max_rms", 2),
    ("[parameters]\nf_esr_hz = { min = 1, top = 3 }\n", "f_esr_hz.top", 2),
    ("[margins]\nmin_gain_margin_db = 'six'\n", "margins.min_gain_margin_db", 2),
    ("[margins]\ncrossover_hz = [3, 2]\n", "margins.crossover_hz", 2),
    ("[margins]\ncrossover_hz = [3]\n", "margins.crossover_hz", 2),
    ("[margins]\nrequire_stable = 1\n", "margins.require_stable", 2),
])
def test_errors_name_key_and_line(text, key, line):
    with pytest.raises(InputError) as ei:
        parse_limits(text, "lim.toml")
    assert key in str(ei.value)
    assert ei.value.source == "lim.toml"
    assert ei.value.line == line


def test_bad_toml_and_missing_file(tmp_path):
    with pytest.raises(InputError, match="not valid TOML") as ei:
        parse_limits("[margins\n", "x.toml")
    assert ei.value.line == 1
    with pytest.raises(InputError, match="file not found"):
        read_limits(tmp_path / "nope.toml")


def _row(**kw):
    base = {"phase_margin_deg": 50.0, "gain_margin_db": 10.0, "crossover_hz": 30e3,
            "closed_loop_stable": True, "fit_order": 2, "fit_rms_db": 0.2,
            "param:f_esr_hz": 40e3, "param:k": 1.0}
    base.update(kw)
    return base


LIM = parse_limits(GOOD)


def test_judge_pass():
    assert judge(_row(), LIM) == ("pass", [])


@pytest.mark.parametrize("change,needle", [
    ({"phase_margin_deg": 44.9}, "phase margin 44.9 deg < 45"),
    ({"gain_margin_db": 5.0}, "gain margin 5 dB < 6"),
    ({"crossover_hz": 19e3}, "crossover 1.9e+04 < 2e+04 Hz"),
    ({"crossover_hz": 61e3}, "crossover 6.1e+04 > 6e+04 Hz"),
    ({"closed_loop_stable": False}, "closed loop unstable"),
    ({"fit_rms_db": 1.5}, "fit residual 1.5 dB rms > 1"),
    ({"param:f_esr_hz": 90e3}, "f_esr_hz 9e+04 > 8e+04"),
    ({"param:k": 0.4}, "k 0.4 < 0.5"),
    ({"phase_margin_deg": None}, "phase margin not available"),
    ({"param:f_esr_hz": None}, "f_esr_hz not available"),
    ({"crossover_hz": math.nan}, "crossover not available"),
])
def test_judge_each_limit_fails_alone(change, needle):
    status, reasons = judge(_row(**change), LIM)
    assert status == "fail"
    assert reasons == [needle]


def test_judge_edges_inclusive_and_infinite_gain_margin():
    # A figure exactly on a limit passes; no phase crossover (gain margin = inf) passes a minimum.
    assert judge(_row(phase_margin_deg=45.0, crossover_hz=60e3, gain_margin_db=math.inf), LIM)[0] == "pass"


def test_judge_without_limits_and_unfitted_rows():
    assert judge(_row(), Limits()) == ("measured", [])
    # a loop sweep measured from data has no fit: fit limits do not apply
    assert judge(_row(fit_order=None, fit_rms_db=None), parse_limits("[fit]\nmax_rms_db = 1\n"))[0] == "pass"
    # several failures are all reported
    st, reasons = judge(_row(phase_margin_deg=30.0, gain_margin_db=2.0), LIM)
    assert st == "fail" and len(reasons) == 2
