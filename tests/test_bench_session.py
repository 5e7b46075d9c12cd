"""Session reliability over genuine pyvisa code paths: retry, resync, error queue, lost link."""

import dataclasses

import numpy as np
import pytest

from benchfit.bench.profile import find_profile
from benchfit.bench.sim_transport import simulated_session
from benchfit.bench.simulator import Faults, SimulatedAnalyzer
from benchfit.errors import InstrumentError


def lowpass(f):
    return 1.0 / (1.0 + 1j * np.asarray(f) / 1e3)


def profile(**changes):
    base = dataclasses.replace(find_profile("generic-analyzer"), timeout_s=0.25, retries=2,
                               complete_timeout_s=None)
    return dataclasses.replace(base, **changes)


def test_late_reply_after_timeout_is_discarded_by_resync(tmp_path):
    # Query 2 (the first FREQ:STAR?) answers 0.4 s late: after the 0.25 s timeout.  Without the
    # resync its late answer would be read as the reply to the next query.
    inst = SimulatedAnalyzer(lowpass, faults=Faults(timeout_on_query=2, late_reply_s=0.4))
    with simulated_session(inst, profile(), folder=tmp_path) as s:
        s.identify()                              # query 1
        s.write("FREQ:STAR 123")
        assert float(s.query("FREQ:STAR?")) == 123.0   # query 2 times out, resync, retry
        s.write("FREQ:STOP 4567")
        assert float(s.query("FREQ:STOP?")) == 4567.0  # stays in step afterwards
        assert s.stats() == {"timeouts": 1, "resyncs": 1, "malformed": 0}


def test_lost_reply_is_retried(tmp_path):
    inst = SimulatedAnalyzer(lowpass, faults=Faults(timeout_on_query=2, late_reply_s=None))
    with simulated_session(inst, profile(), folder=tmp_path) as s:
        s.identify()
        assert s.query("*OPC?") == "1"
        assert s.timeouts == 1


def test_retries_exhausted_names_resource_and_command(tmp_path):
    inst = SimulatedAnalyzer(lowpass)
    with simulated_session(inst, profile(retries=1), folder=tmp_path) as s:
        s.identify()
        # data query before any sweep: the instrument answers nothing (and logs -230)
        with pytest.raises(InstrumentError) as info:
            s.query_values("CALC:DATA?")
        msg = str(info.value)
        assert "TCPIP0::simulated::inst0::INSTR" in msg and "CALC:DATA?" in msg
        assert "tried 2 times" in msg and "no answer within 0.25 s" in msg
        # the queue, read after the last try, tells the real cause (once per try)
        assert msg.count("-230 Data corrupt or stale") == 2
        assert s.drain_errors() == []


def test_bad_command_becomes_instrument_error_naming_it(tmp_path):
    inst = SimulatedAnalyzer(lowpass)
    with simulated_session(inst, profile(), folder=tmp_path) as s:
        s.configure("SENS:FREQ:STAR 100")
        with pytest.raises(InstrumentError) as info:
            s.configure("SENS:BWID:WRONG 10")
        msg = str(info.value)
        assert "'SENS:BWID:WRONG 10'" in msg and "-113 Undefined header" in msg
        assert s.drain_errors() == []             # the queue was drained


def test_several_errors_reported_in_order(tmp_path):
    inst = SimulatedAnalyzer(lowpass)
    with simulated_session(inst, profile(), folder=tmp_path) as s:
        s.write("FREQ:STAR 1e12")
        s.write("NOPE")
        assert [c for c, _ in s.drain_errors()] == [-222, -113]


def test_malformed_block_is_retried(tmp_path):
    inst = SimulatedAnalyzer(lowpass, noise=0.0, freq_resolution_hz=0.0,
                             faults=Faults(corrupt_block_on_query=3))
    with simulated_session(inst, profile(), folder=tmp_path) as s:
        s.identify()                                          # query 1
        s.configure("FORM:DATA REAL,64;FREQ:STAR 10;FREQ:STOP 1e3;SWE:POIN 3;INIT")  # query 2
        f = s.query_values("SWE:AXIS?")                      # query 3: corrupt, then retried
        np.testing.assert_allclose(f, [10, 100, 1000])
        assert s.timeouts == 1 and s.resyncs == 1


@pytest.mark.parametrize("transport", ["sim", "tcp"])
def test_dropped_connection_is_a_clear_error(tmp_path, transport):
    inst = SimulatedAnalyzer(lowpass, faults=Faults(drop_on_query=2))
    with simulated_session(inst, profile(), transport=transport, folder=tmp_path) as s:
        s.identify()
        with pytest.raises(InstrumentError) as info:
            s.query("FREQ:STAR?")
            s.query("FREQ:STAR?")
        # pyvisa-sim raises at once; pyvisa-py on a closed socket only times out
        assert "connection lost" in str(info.value) or "stopped answering" in str(info.value)


def test_socket_resources_send_without_nagle_delay():
    import socket

    inst = SimulatedAnalyzer(lowpass)
    with simulated_session(inst, profile(), transport="tcp") as s:
        sock = s.resource.visalib.sessions[s.resource.session].interface
        assert sock.getsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY) == 1
        s.configure("FREQ:STAR 5")
        assert inst.start_hz == 5.0


def test_session_against_a_plain_pyvisa_sim_device(tmp_path):
    # pyvisa-sim's own YAML device (exact-match dialogues and its own error queue), so the
    # error-queue handling is checked against a backend benchfit did not write.
    import pyvisa

    from benchfit.bench.session import Session

    yaml = tmp_path / "plain.yaml"
    yaml.write_text(
        'spec: "1.1"\n'
        "devices:\n"
        "  analyzer:\n"
        "    eom:\n"
        "      TCPIP INSTR:\n"
        '        q: "\\n"\n'
        '        r: "\\n"\n'
        "    error:\n"
        "      error_queue:\n"
        '        - q: "SYST:ERR?"\n'
        "          default: '0,\"No error\"'\n"
        "          command_error: '-113,\"Undefined header\"'\n"
        "    dialogues:\n"
        '      - q: "*IDN?"\n'
        '        r: "benchfit,plain device,1,1"\n'
        "    properties:\n"
        "      start:\n"
        "        default: 10.0\n"
        "        getter:\n"
        '          q: "SENS:FREQ:STAR?"\n'
        '          r: "{:.6f}"\n'
        "        setter:\n"
        '          q: "SENS:FREQ:STAR {:f}"\n'
        "        specs:\n"
        "          type: float\n"
        "          min: 0.001\n"
        "          max: 1e9\n"
        "resources:\n"
        "  TCPIP0::127.0.0.1::inst0::INSTR:\n"
        "    device: analyzer\n")
    rm = pyvisa.ResourceManager(f"{yaml}@sim")
    res = rm.open_resource("TCPIP0::127.0.0.1::inst0::INSTR")
    prof = profile(commands={**find_profile("generic-analyzer").commands, "error_query": "SYST:ERR?"})
    with Session(res, prof, name="plain") as s:
        assert s.identify() == "benchfit,plain device,1,1"
        s.configure("SENS:FREQ:STAR 250")
        assert float(s.query("SENS:FREQ:STAR?")) == 250.0
        with pytest.raises(InstrumentError, match=r"plain after 'SENS:FREQ:STRT 5'.*-113 Undefined header"):
            s.configure("SENS:FREQ:STRT 5")
        with pytest.raises(InstrumentError, match=r"SENS:FREQ:STAR 1e12.*-113"):
            s.configure("SENS:FREQ:STAR 1e12")      # pyvisa-sim rejects out-of-spec values the same way
        assert float(s.query("SENS:FREQ:STAR?")) == 250.0


def test_nothing_listening_is_a_clear_error():
    import socket

    from benchfit.bench.session import open_session

    probe = socket.socket()
    probe.bind(("127.0.0.1", 0))
    port = probe.getsockname()[1]
    probe.close()                      # nothing listens on this loopback port now
    with pytest.raises(InstrumentError, match=f"TCPIP0::127.0.0.1::{port}::SOCKET.*(refused|cannot open)"):
        with open_session(f"TCPIP0::127.0.0.1::{port}::SOCKET", profile()) as s:
            s.identify()


def test_complete_timeout_covers_a_long_sweep(tmp_path):
    # 50 points x 10 ms = 0.5 s of sweep: longer than the 0.25 s read timeout
    inst = SimulatedAnalyzer(lowpass, time_per_point_s=0.01)
    with simulated_session(inst, profile(retries=0), folder=tmp_path / "a") as s:
        s.configure("SWE:POIN 50")
        s.write("INIT")
        with pytest.raises(InstrumentError, match=r"\*OPC\?.*0.25 s.*complete_timeout_s"):
            s.wait_complete()
    inst = SimulatedAnalyzer(lowpass, time_per_point_s=0.01)
    with simulated_session(inst, profile(complete_timeout_s=3.0), folder=tmp_path / "b") as s:
        s.configure("SWE:POIN 50")
        s.write("INIT")
        s.wait_complete()
        assert s.resource.timeout == 250.0      # the read timeout is back
        assert s.timeouts == 0
