"""Batch limits judge every crossing: a second gain crossing at a resonance fails a unit."""

import math
import re

import control as ct
import numpy as np

from benchfit.batch.limits import crossing_reasons, judge, parse_limits
from benchfit.batch.task import TaskSettings, run_task

LIM = parse_limits("[margins]\nmin_phase_margin_deg = 45\nmin_gain_margin_db = 3\n")


def _true_loop(w0=2 * np.pi * 40e3, q=80.0):
    """Integrator crossing near 2.5 kHz, a pole at 15 kHz and a Q=80 resonance at 40 kHz."""
    s = ct.tf("s")
    return (2 * np.pi * 2.5e3 / s / (1 + s / (2 * np.pi * 15e3))
            / (1 + s / (w0 * q) + (s / w0) ** 2))


def _write(path, sys_, f):
    T = sys_(2j * np.pi * f)
    with open(path, "w") as fh:
        fh.write("Frequency (Hz),Gain (dB),Phase (deg)\n")
        for a, b, c in zip(f, 20 * np.log10(np.abs(T)), np.degrees(np.unwrap(np.angle(T))), strict=True):
            fh.write(f"{a:.9g},{b:.9f},{c:.9f}\n")


def test_second_gain_crossing_fails_the_unit_and_is_named(tmp_path):
    sys_ = _true_loop()
    f = np.logspace(1, 6, 2001)
    p = tmp_path / "unit.csv"
    _write(p, sys_, f)
    row = run_task(p, TaskSettings(quantity="loop", limits=LIM))
    # Reference: python-control stability_margins(returnall=True) on the TRUE loop lists every
    # gain crossing (wc) with its phase margin (pm); the main one passes 45 deg, others do not.
    gm, pm, sm, wpc, wgc, wms = ct.stability_margins(sys_, returnall=True)
    fgc, pm = np.asarray(wgc) / (2 * np.pi), np.asarray(pm)
    ref_bad = sorted(fc for fc, m in zip(fgc, pm, strict=True) if m < 45 and fc > 10e3)
    assert len(ref_bad) >= 1
    assert pm[np.argmin(np.abs(fgc - 2.4e3))] > 45           # the main crossover alone passes
    assert row["status"] == "fail", row
    named = [float(x) for x in re.findall(r"at the gain crossing at ([0-9.e+]+) Hz", row["reason"])]
    assert len(named) == len(ref_bad)
    for fc, ref in zip(sorted(named), ref_bad, strict=True):
        assert abs(fc / ref - 1) < 0.01                       # 2001 log points: well inside 1 %
    assert "phase margin" in row["reason"]


def test_crossing_rule_is_the_design_rule_and_skips_the_main_pair():
    row = {"phase_margin_deg": 60.0, "gain_margin_db": 10.0, "phase_crossover_hz": 9e3,
           "crossings": '[["gain", 1000.0, 60.0, true], ["phase", 9000.0, 10.0, false], '
                        '["gain", 20000.0, 44.0, false], ["phase", 30000.0, -2.0, false], '
                        '["phase", 40000.0, -8.0, false]]'}
    reasons = crossing_reasons(row, LIM)
    # the main crossover and the phase crossing behind gain_margin_db are not repeated; a phase
    # crossing 2 dB above 0 dB misses the 3 dB minimum, one 8 dB above meets it (passrules:
    # the distance from 0 dB is what the target bounds)
    assert reasons == ["phase margin 44 deg < 45 at the gain crossing at 2e+04 Hz (2 of 2)",
                       "gain margin -2 dB < 3 at the phase crossing at 3e+04 Hz (2 of 3)"]
    assert judge(row, LIM)[0] == "fail"
    ok = dict(row, crossings='[["gain", 1000.0, 60.0, true], ["phase", 9000.0, 10.0, false]]')
    assert judge(ok, LIM) == ("pass", [])
    # an older table without the cell is judged on the main figures only
    assert judge({k: v for k, v in row.items() if k != "crossings"}, LIM) == ("pass", [])
    # a crossing whose margin could not be computed (JSON null) fails, as in the design
    nan_row = dict(row, crossings='[["gain", 1000.0, 60.0, true], ["gain", 5e4, null, false]]')
    assert crossing_reasons(nan_row, LIM) == [
        "phase margin nan deg < 45 at the gain crossing at 5e+04 Hz (2 of 2)"]
    assert math.isfinite(LIM.min_phase_margin_deg)
