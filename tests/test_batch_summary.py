"""Lot summary on hand-made rows: counts, yield, percentiles, worst units, fail reasons, plots."""

import json
import math

import numpy as np
import pytest

from benchfit.batch.limits import parse_limits
from benchfit.batch.summary import LotSummary, plot_histograms, summarise
from benchfit.fileio import to_json_text

ROWS = [
    {"file": "u1", "unit": "A", "status": "pass", "phase_margin_deg": 60.0, "gain_margin_db": 12.0},
    {"file": "u2", "unit": "B", "status": "pass", "phase_margin_deg": 50.0, "gain_margin_db": math.inf},
    {"file": "u3", "unit": "C", "status": "fail", "phase_margin_deg": 40.0, "gain_margin_db": 5.0,
     "reason": "phase margin 40 deg < 45; gain margin 5 dB < 6"},
    {"file": "u4", "unit": "D", "status": "fail", "phase_margin_deg": 30.0, "gain_margin_db": 9.0,
     "reason": "phase margin 30 deg < 45", "param:f_esr_hz": 2e4},
    {"file": "u5", "unit": "E", "status": "error", "error": "file is empty"},
]


def test_counts_yield_and_reasons():
    s = summarise(ROWS, n_worst=2)
    assert s.total == 5
    assert s.counts == {"error": 1, "fail": 2, "pass": 2}
    assert s.yield_fraction == pytest.approx(0.5)   # errors are not judged units
    assert s.fail_reasons == {"phase margin": 2, "gain margin": 1}
    assert [w["unit"] for w in s.worst] == ["D", "C"]  # least phase margin first
    assert s.errors == [{"file": "u5", "error": "file is empty"}]


def test_percentiles_match_the_linear_definition():
    # Hyndman & Fan (1996), "Sample quantiles in statistical packages", definition 7:
    # Q(p) = x[k] + (h - k)(x[k+1] - x[k]) with h = (n - 1) p on the sorted sample (0-based).
    s = summarise(ROWS)
    pm = s.figures["phase_margin_deg"]
    x = [30.0, 40.0, 50.0, 60.0]
    h = 3 * 0.05
    assert pm["p5"] == pytest.approx(x[0] + h * (x[1] - x[0]))
    assert pm["p50"] == pytest.approx(45.0)
    assert pm["min"] == 30.0 and pm["max"] == 60.0 and pm["n"] == 4
    assert pm["std"] == pytest.approx(np.std(x, ddof=1))
    gm = s.figures["gain_margin_db"]
    assert gm["n"] == 3 and gm["n_infinite"] == 1   # inf is counted apart, not averaged
    assert s.figures["param:f_esr_hz"]["n"] == 1


def test_json_round_trip_and_report():
    s = summarise(ROWS)
    d = json.loads(to_json_text(s))
    back = LotSummary.from_dict(d)
    assert back.to_dict() == s.to_dict()
    text = s.report()
    assert "yield 50.0 %" in text and "phase margin (2)" in text and "u5: file is empty" in text


def test_without_limits_no_yield():
    s = summarise([{"file": "a", "status": "measured", "phase_margin_deg": 50.0}])
    assert s.yield_fraction is None and "yield" not in s.report()


def test_histograms_png(tmp_path):
    lim = parse_limits("[margins]\nmin_phase_margin_deg = 45\n")
    p = plot_histograms(ROWS, tmp_path / "h.png", limits=lim)
    assert p.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
