"""The SCPI instrument simulator: command forms, error queue, timing, transports.

Error numbers are the SCPI-1999 Vol. 2 standard ones (-113 undefined header,
-222 data out of range...; from memory).  Long/short mnemonic forms per
SCPI-1999 Vol. 1 §6.2.  pyvisa's own binary-block reader is the outside
reference for what the simulator sends.
"""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from benchfit.bench.blocks import parse_ascii, parse_block
from benchfit.bench.scpi import header_matches, short_form
from benchfit.bench.sim_transport import LoopbackServer, attach_to_pyvisa_sim, sim_resource_manager
from benchfit.bench.simulator import ERROR_QUEUE_LENGTH, SimulatedAnalyzer
from benchfit.errors import InputError


def lowpass(f):
    # first-order RC low-pass H = 1/(1 + j f/fc), fc = 1 kHz (textbook formula)
    return 1.0 / (1.0 + 1j * np.asarray(f) / 1e3)


class Clock:
    def __init__(self):
        self.t = 100.0

    def __call__(self):
        return self.t


def ask(inst, text):
    inst.receive(text)
    r = inst.take_reply()
    return None if r is None else r.decode()


def errors(inst):
    out = []
    while True:
        code = int(ask(inst, "SYST:ERR?").split(",")[0])
        if code == 0:
            return out
        out.append(code)


@pytest.mark.parametrize("cmd", ["SENSe:FREQuency:STARt 250", "sens:freq:star 250", "FREQ:STAR 250",
                                 ":SENS:FREQUENCY:start 250", "Sense:Freq:Start 250"])
def test_long_short_and_case_forms(cmd):
    inst = SimulatedAnalyzer(lowpass)
    inst.receive(cmd)
    assert inst.start_hz == 250.0
    assert errors(inst) == []
    assert float(ask(inst, "freq:star?")) == 250.0


def test_half_forms_are_rejected_with_undefined_header():
    inst = SimulatedAnalyzer(lowpass)
    inst.receive("SENS:FREQU:STAR 250")  # neither the short nor the long form
    inst.receive("SENS:FREQ:START2 1")
    assert errors(inst) == [-113, -113]
    assert inst.start_hz == 10.0


@pytest.mark.parametrize("cmd,code", [
    ("SENS:FREQ:STAR 1e12", -222),
    ("SENS:SWE:POIN 0", -222),
    ("SOUR:VOLT 50", -222),
    ("SENS:FREQ:STAR", -109),
    ("SENS:FREQ:STAR ten", -104),
    ("SENS:FREQ:STAR 1,2", -108),
    ("FORM:DATA REAL,16", -224),
    ("FORM:BORD SIDEWAYS", -224),
    ("SENS:SWE:SPAC CUBIC", -224),
    ("CALC:DATA?", -230),
])
def test_standard_error_numbers(cmd, code):
    inst = SimulatedAnalyzer(lowpass)
    inst.receive(cmd)
    assert errors(inst) == [code]


def test_error_text_and_empty_queue_answer():
    inst = SimulatedAnalyzer(lowpass)
    assert ask(inst, "SYST:ERR?") == '0,"No error"'
    inst.receive("BOGUS:CMD 1")
    assert ask(inst, "SYSTem:ERRor:NEXT?") == '-113,"Undefined header;BOGUS:CMD"'


def test_queue_overflow_replaces_last_entry_with_350():
    inst = SimulatedAnalyzer(lowpass)
    for _ in range(ERROR_QUEUE_LENGTH + 3):
        inst.receive("NOPE")
    got = errors(inst)
    assert len(got) == ERROR_QUEUE_LENGTH
    assert got[-1] == -350 and got[0] == -113


def test_cls_clears_queue_and_rst_keeps_it():
    inst = SimulatedAnalyzer(lowpass)
    inst.receive("NOPE")
    inst.receive("FREQ:STAR 500")
    inst.receive("*RST")
    assert inst.start_hz == 10.0
    assert errors(inst) == [-113]
    inst.receive("NOPE")
    inst.receive("*CLS")
    assert errors(inst) == []


def test_units_separated_by_semicolons():
    inst = SimulatedAnalyzer(lowpass)
    inst.receive("FREQ:STAR 20;FREQ:STOP 2000;SWE:POIN 5")
    assert (inst.start_hz, inst.stop_hz, inst.points) == (20.0, 2000.0, 5)


def test_data_only_after_simulated_sweep_time():
    clock = Clock()
    inst = SimulatedAnalyzer(lowpass, time_per_point_s=0.01, noise=0.0, clock=clock)
    inst.receive("FREQ:STAR 10;FREQ:STOP 1e4;SWE:POIN 100;INIT")
    inst.receive("*OPC?")
    assert inst.take_reply() is None          # 100 points x 10 ms = 1 s to go
    clock.t += 0.99
    assert inst.take_reply() is None
    clock.t += 0.02
    assert inst.take_reply() == b"1"


def test_sweep_values_and_axis_in_every_encoding():
    inst = SimulatedAnalyzer(lowpass, noise=0.0, freq_resolution_hz=0.0)
    inst.receive("FREQ:STAR 10;FREQ:STOP 1e5;SWE:POIN 5;SWE:SPAC LOG;INIT")
    f_expected = 10 * 10 ** np.arange(5.0)
    for fmt, enc, order in [("ASC", "ascii", None), ("REAL,32", "real32", "big"),
                            ("REAL,64", "real64", "big"), ("REAL,64", "real64", "little")]:
        inst.receive(f"FORM:DATA {fmt}")
        inst.receive(f"FORM:BORD {'SWAP' if order == 'little' else 'NORM'}")
        inst.receive("SWE:AXIS?")
        raw = inst.take_reply()
        f = parse_ascii(raw) if enc == "ascii" else parse_block(raw, enc, order)
        np.testing.assert_allclose(f, f_expected, rtol=1e-7)
        inst.receive("CALC:DATA?")
        raw = inst.take_reply()
        v = parse_ascii(raw) if enc == "ascii" else parse_block(raw, enc, order)
        np.testing.assert_allclose(v[0::2] + 1j * v[1::2], lowpass(f_expected), rtol=1e-6, atol=1e-7)


def test_frequency_read_back_is_quantised():
    inst = SimulatedAnalyzer(lowpass, freq_resolution_hz=0.5)
    inst.receive("SOUR:FREQ:CW 1000.3")
    assert float(ask(inst, "SOUR:FREQ:CW?")) == 1000.5


def test_noise_level_matches_setting():
    inst = SimulatedAnalyzer(lowpass, noise=1e-2, seed=3)
    inst.receive("FREQ:STAR 10;FREQ:STOP 1e5;SWE:POIN 2001;INIT")
    inst.receive("SWE:AXIS?")
    f = parse_ascii(inst.take_reply())
    inst.receive("CALC:DATA?")
    v = parse_ascii(inst.take_reply())
    rel = (v[0::2] + 1j * v[1::2]) / lowpass(f) - 1
    rms = np.sqrt(np.mean(np.abs(rel) ** 2))
    # 2001 complex samples: the rms estimate is within a few % of the setting
    assert 0.9e-2 < rms < 1.1e-2


def test_through_pyvisa_sim_with_pyvisa_reference_reader(tmp_path):
    rm = sim_resource_manager(tmp_path)
    inst = SimulatedAnalyzer(lowpass, noise=0.0, freq_resolution_hz=0.0)
    name = attach_to_pyvisa_sim(rm, "TCPIP0::bench.sim::inst0::INSTR", inst)
    assert name in rm.list_resources()
    res = rm.open_resource(name, read_termination="\n", write_termination="\n", timeout=2000)
    assert res.query("*IDN?").startswith("benchfit,simulated analyzer")
    res.write("FORM:DATA REAL,64;FORM:BORD SWAP;FREQ:STAR 100;FREQ:STOP 1e4;SWE:POIN 3;INIT")
    assert res.query("*OPC?") == "1"
    values = res.query_binary_values("CALC:DATA?", datatype="d", is_big_endian=False)
    np.testing.assert_allclose(np.array(values[0::2]) + 1j * np.array(values[1::2]),
                               lowpass([100, 1e3, 1e4]), rtol=1e-12)
    res.close()


def test_pyvisa_sim_definitions_do_not_leak_between_folders(tmp_path):
    a = SimulatedAnalyzer(lowpass)
    b = SimulatedAnalyzer(lowpass)
    rm_a = sim_resource_manager(tmp_path / "a")
    rm_b = sim_resource_manager(tmp_path / "b")
    attach_to_pyvisa_sim(rm_a, "TCPIP0::x::inst0::INSTR", a)
    attach_to_pyvisa_sim(rm_b, "TCPIP0::x::inst0::INSTR", b)
    rm_a.open_resource("TCPIP0::x::inst0::INSTR", write_termination="\n").write("FREQ:STAR 777")
    assert a.start_hz == 777.0 and b.start_hz == 10.0


def test_loopback_server_over_pyvisa_py_socket():
    import pyvisa

    inst = SimulatedAnalyzer(lowpass)
    with LoopbackServer(inst) as srv:
        assert srv.resource_name.startswith("TCPIP0::127.0.0.1::")
        rm = pyvisa.ResourceManager("@py")
        res = rm.open_resource(srv.resource_name, read_termination="\n", write_termination="\n",
                               timeout=2000)
        assert res.query("*IDN?") == inst.idn
        res.write("FREQ:STAR 42")
        assert float(res.query("FREQ:STAR?")) == 42.0
        res.close()


def test_loopback_refuses_other_addresses():
    with pytest.raises(InputError, match="not a loopback address"):
        LoopbackServer(SimulatedAnalyzer(lowpass), host="192.0.2.10")


def test_loopback_server_stops_by_itself():
    srv = LoopbackServer(SimulatedAnalyzer(lowpass), lifetime_s=0.2).start()
    srv._thread.join(timeout=5)
    assert not srv._thread.is_alive()
    srv.stop()


@settings(max_examples=80, deadline=None)
@given(st.lists(st.from_regex(r"[A-Z]{3,4}[a-z]{0,6}", fullmatch=True), min_size=1, max_size=4),
       st.randoms())
def test_any_mix_of_long_and_short_forms_matches(nodes, rnd):
    # SCPI-1999 Vol. 1 §6.2: each node may be sent long or short, in any case
    pattern = ":".join(nodes)
    sent = []
    for node in nodes:
        word = node if rnd.random() < 0.5 else short_form(node)
        sent.append("".join(c.upper() if rnd.random() < 0.5 else c.lower() for c in word))
    assert header_matches(":".join(sent), pattern)
    assert not header_matches(":".join(sent) + ":EXTRa", pattern)
