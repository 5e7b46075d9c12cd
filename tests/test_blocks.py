"""IEEE 488.2 definite-length blocks and ASCII lists, against hand-built bytes.

Block layout per IEEE 488.2 §8.7.9 (definite length arbitrary block response
data): '#', one non-zero digit d, d digits giving the byte count N, N bytes.
Byte order per SCPI-1999 Vol. 2 FORMat:BORDer: NORMal = most significant byte
first, SWAPped = least significant first.  Hand-built bytes use Python's
struct module (IEEE 754 packing) as the outside reference, and pyvisa's own
general-purpose block decoder is used as a second reference.
"""

import struct

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from benchfit.bench.blocks import (
    MalformedReply,
    block_header,
    build_block,
    encode_ascii,
    parse_ascii,
    parse_block,
)
from benchfit.errors import InstrumentError


def test_real64_big_endian_hand_built():
    payload = struct.pack(">3d", 1.5, -2.25, 1e-12)
    block = b"#224" + payload  # 24 bytes: two length digits
    assert block_header(block) == (4, 24)
    np.testing.assert_array_equal(parse_block(block, "real64", "big"), [1.5, -2.25, 1e-12])


def test_real32_little_endian_hand_built_with_terminator():
    payload = struct.pack("<2f", 0.5, -3.0)
    block = b"#18" + payload + b"\n"
    np.testing.assert_array_equal(parse_block(block, "real32", "little"), [0.5, -3.0])


def test_byte_order_matters():
    payload = struct.pack(">d", 1.0)
    block = b"#18" + payload
    assert parse_block(block, "real64", "big")[0] == 1.0
    assert parse_block(block, "real64", "little")[0] != 1.0


def test_int16_and_int8_hand_built():
    np.testing.assert_array_equal(parse_block(b"#14" + struct.pack(">2h", -300, 7), "int16", "big"),
                                  [-300, 7])
    np.testing.assert_array_equal(parse_block(b"#13" + struct.pack("3b", -128, 0, 127), "int8"),
                                  [-128, 0, 127])


def test_nine_digit_length_field():
    payload = struct.pack(">d", 2.0)
    block = b"#9000000008" + payload
    assert block_header(block) == (11, 8)
    assert parse_block(block, "real64")[0] == 2.0


def test_empty_block():
    assert parse_block(b"#10", "real64").size == 0


def test_data_bytes_equal_to_newline_are_kept():
    # 0x0A inside binary data is data, not a terminator (that is why blocks carry a length).
    payload = struct.pack(">f", struct.unpack(">f", b"\x0a\x0a\x0a\x0a")[0])
    assert b"\n" in payload
    out = parse_block(b"#14" + payload + b"\n", "real32")
    assert out.size == 1


@pytest.mark.parametrize("enc,order", [("real32", "big"), ("real32", "little"),
                                       ("real64", "big"), ("real64", "little")])
def test_matches_pyvisa_reference_decoder(enc, order):
    from pyvisa.util import from_ieee_block, to_ieee_block

    values = [0.0, 1.25, -7.5e3, 3.14159]
    dt = "f" if enc == "real32" else "d"
    ref_block = to_ieee_block(values, datatype=dt, is_big_endian=(order == "big"))
    ours = parse_block(bytes(ref_block), enc, order)
    np.testing.assert_allclose(ours, values, rtol=1e-6)
    np.testing.assert_allclose(from_ieee_block(build_block(values, enc, order), datatype=dt,
                                               is_big_endian=(order == "big")), values, rtol=1e-6)


@pytest.mark.parametrize("data,fragment", [
    (b"1.0,2.0\n", "starting with '#'"),
    (b"", "starting with '#'"),
    (b"#0" + b"\x00" * 8 + b"\n", "indefinite-length"),
    (b"#x8", "expected a digit"),
    (b"#3", "cut short"),
    (b"#2a4" + b"\x00" * 24, "decimal digits"),
    (b"#216" + b"\x00" * 8, "announces 16 bytes but only 8"),
    (b"#18" + b"\x00" * 12, "unexpected bytes after"),
    (b"#17" + b"\x00" * 7, "whole number of 8-byte"),
])
def test_malformed_blocks_raise_clear_errors(data, fragment):
    with pytest.raises(MalformedReply, match=fragment) as info:
        parse_block(data, "real64", what="CALC:DATA?")
    assert "CALC:DATA?" in str(info.value)
    assert isinstance(info.value, InstrumentError)


def test_ascii_list_and_errors():
    np.testing.assert_array_equal(parse_ascii(b"+1.0E+00,-2.5,3e-3\n"), [1.0, -2.5, 3e-3])
    with pytest.raises(MalformedReply, match="field 2 is 'abc'"):
        parse_ascii("1.0,abc,3")
    with pytest.raises(MalformedReply, match="empty reply"):
        parse_ascii("  \n")
    with pytest.raises(MalformedReply, match="binary block arrived"):
        parse_ascii("#18xxxxxxxx")
    with pytest.raises(MalformedReply, match="binary bytes"):
        parse_ascii(b"\xff\xfe")


@settings(max_examples=60, deadline=None)
@given(st.lists(st.floats(allow_nan=False, allow_infinity=False, width=64), max_size=40),
       st.sampled_from(["big", "little"]))
def test_round_trip_real64(values, order):
    out = parse_block(build_block(values, "real64", order) + b"\n", "real64", order)
    np.testing.assert_array_equal(out, np.asarray(values, dtype=float))


@settings(max_examples=40, deadline=None)
@given(st.lists(st.floats(-1e30, 1e30, allow_nan=False), min_size=1, max_size=30))
def test_ascii_round_trip_12_digits(values):
    out = parse_ascii(encode_ascii(values))
    np.testing.assert_allclose(out, values, rtol=1e-11, atol=0)
