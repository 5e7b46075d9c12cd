"""Scope capture: arm, trigger, scaling and every data encoding, against the simulated scope.

The waveform is the underdamped second-order step response
1 - e^(-zeta wn t)(cos wd t + zeta / sqrt(1 - zeta^2) sin wd t), wd = wn sqrt(1 - zeta^2)
(standard textbook formula); the captured trace must equal it within the
quantisation step the scope reports (y increment / 2).
"""

import dataclasses

import numpy as np
import pytest

from benchfit.bench.profile import find_profile
from benchfit.bench.scope import capture_trace
from benchfit.bench.sim_transport import simulated_session
from benchfit.bench.simscope import SimulatedScope
from benchfit.data.canonical import read_canonical_trace
from benchfit.errors import InputError, InstrumentError

ZETA, WN = 0.4, 2 * np.pi * 10e3


def step(t):
    t = np.asarray(t, dtype=float)
    tp = np.clip(t, 0, None)
    wd = WN * np.sqrt(1 - ZETA ** 2)
    y = 1 - np.exp(-ZETA * WN * tp) * (np.cos(wd * tp) + ZETA / np.sqrt(1 - ZETA ** 2) * np.sin(wd * tp))
    return np.where(t < 0, 0.0, 2.5 * y)


def profile(**changes):
    base = find_profile("generic-scope")
    if changes.get("encoding", "").startswith("int"):
        # the simulator's own code-scaling queries (the shipped profile sends volts)
        changes["commands"] = {**base.commands, "volts_per_code": "TRACe:CODE:VOLTs? {channel}",
                               "volts_at_code_zero": "TRACe:CODE:ZERO? {channel}"}
    return dataclasses.replace(base, timeout_s=0.3, complete_timeout_s=None, retries=1, **changes)


@pytest.mark.parametrize("encoding,order", [("int8", "big"), ("int16", "big"), ("int16", "little"),
                                            ("int32", "little"), ("real32", "big"), ("ascii", "big")])
def test_scaled_trace_matches_waveform(tmp_path, encoding, order):
    scope = SimulatedScope(step, record_points=500, sample_interval_s=2e-7, pretrigger=0.2)
    out = tmp_path / "t.csv"
    with simulated_session(scope, profile(encoding=encoding, byte_order=order), folder=tmp_path) as s:
        trace = capture_trace(s, "CH1", out=out)
    t_expected = -0.2 * 500 * 2e-7 + np.arange(500) * 2e-7
    np.testing.assert_allclose(trace.time_s, t_expected, rtol=0, atol=1e-15)
    sc = trace.meta["scaling"]
    yinc = scope.volts_per_code
    assert sc["sample_interval_s"] == 2e-7
    assert sc["volts_at_code_zero"] == pytest.approx(scope.volts_at_code_zero if encoding.startswith("int")
                                                     else 0.0, rel=1e-11)
    assert scope.volts_at_code_zero != 0  # the offset path is exercised
    if encoding.startswith("int"):
        assert sc["volts_per_code"] == pytest.approx(yinc, rel=1e-11)
    else:
        assert sc["volts_per_code"] is None
    # half a code of quantisation, plus the scale's 12-digit ASCII rounding and, where the
    # scope sends volts as REAL,32, float32's half ulp at 2.5 V
    slack = 1e-11 + (2.5 * 2.0 ** -24 if encoding == "real32" else 0.0)
    assert np.max(np.abs(trace.channel("CH1") - step(trace.time_s))) <= 0.5 * yinc * (1 + 1e-9) + slack
    if encoding == "int8":
        assert yinc > 2.5 / 256    # 8 bits really were used
    again = read_canonical_trace(out)
    np.testing.assert_allclose(again.channel(), trace.channel(), rtol=1e-12)
    assert again.meta["instrument"] == scope.idn and again.meta["profile"] == "generic-scope"


def test_over_loopback_socket():
    scope = SimulatedScope(step, record_points=300, sample_interval_s=1e-6)
    with simulated_session(scope, profile(), transport="tcp") as s:
        trace = capture_trace(s, "CH1")
    assert len(trace) == 300


def test_without_trigger_the_wait_times_out(tmp_path):
    scope = SimulatedScope(step)
    with simulated_session(scope, profile(), folder=tmp_path) as s:
        with pytest.raises(InstrumentError, match=r"'\*OPC\?'.*did not complete in time"):
            capture_trace(s, "CH1", trigger=False)


def test_unknown_channel_is_reported_by_the_error_queue(tmp_path):
    scope = SimulatedScope(step)
    with simulated_session(scope, profile(), folder=tmp_path) as s:
        with pytest.raises(InstrumentError, match=r"TRACe:DATA\? CH7.*-224"):
            capture_trace(s, "CH7")


def test_analyzer_profile_is_refused(tmp_path):
    scope = SimulatedScope(step)
    with simulated_session(scope, find_profile("generic-analyzer"), folder=tmp_path) as s:
        with pytest.raises(InputError, match="expected a scope profile"):
            capture_trace(s)
