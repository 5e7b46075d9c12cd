"""Fuzzing the instrument-side readers: TOML profiles and IEEE 488.2 data replies.

Profiles: the shipped ones round-trip through to_dict/from_dict; a damaged
profile (text damage, or one key given a value of the wrong type) is either
valid or refused with an InputError naming the file, never another exception.

Blocks: a definite-length arbitrary block (IEEE 488.2-1992 §8.7.9:
'#', one non-zero digit d, d digits giving the byte count N, N bytes) built
for any values and encoding decodes to the same values; any damaged reply
decodes or raises the project's InstrumentError (MalformedReply), which capture
retries; never another exception.
"""

import numpy as np
import pytest
from fuzz_mutate import MAX_MESSAGE, expect_own_error, mutation
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from benchfit.bench.blocks import (
    BYTE_ORDERS,
    ENCODINGS,
    build_block,
    encode_ascii,
    parse_ascii,
    parse_block,
)
from benchfit.bench.profile import SHIPPED_DIR, Profile, load_profile_file
from benchfit.errors import InstrumentError

# A reader must answer damaged input with a result or an InputError, never with numpy
# RuntimeWarnings printed on the user's terminal.
pytestmark = pytest.mark.filterwarnings("error::RuntimeWarning")

NORMAL = settings(max_examples=200, deadline=None,
                  suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])
FUZZ = settings(deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture,
                                                      HealthCheck.too_slow, HealthCheck.data_too_large])
SHIPPED = sorted(SHIPPED_DIR.glob("*.toml"))
BINARY = [e for e, dt in ENCODINGS.items() if dt]
_LIMITS = {"int8": 2**7, "int16": 2**15, "int32": 2**31}


# ----- profiles ----------------------------------------------------------------------------
@pytest.mark.parametrize("path", SHIPPED, ids=[p.stem for p in SHIPPED])
def test_shipped_profiles_round_trip(path):
    prof = load_profile_file(path)
    again = Profile.from_dict(prof.to_dict())
    assert again.to_dict() == prof.to_dict()
    assert prof.name == path.stem


_TOML_VALUES = st.sampled_from(['""', '"x"', "0", "-1", "1e400", "nan", "inf", "-inf", "true",
                                "[]", "[1, 2]", "{}", '{ a = 1 }', "1979-05-27", '"{channel}"',
                                '"{nope}"', '"{"', "99999999999999999999", "0.0", "3601"])


@st.composite
def damaged_profile(draw):
    text = draw(st.sampled_from(SHIPPED)).read_bytes()
    if draw(st.booleans()):
        return draw(mutation(text, issue21=True))
    # one 'key = value' line given a value of another type
    lines = text.split(b"\n")
    keyed = [i for i, ln in enumerate(lines) if b"=" in ln and not ln.lstrip().startswith(b"#")]
    i = draw(st.sampled_from(keyed))
    key = lines[i].split(b"=", 1)[0]
    lines[i] = key + b"= " + draw(_TOML_VALUES).encode()
    return b"\n".join(lines)


def _profile_check(tmp_path_factory, data):
    p = tmp_path_factory.mktemp("prof") / "bench.toml"
    p.write_bytes(data)
    prof = expect_own_error(lambda: load_profile_file(p), names=p.name, size=len(data),
                            max_message=MAX_MESSAGE)
    if prof is not None:
        assert isinstance(prof, Profile) and prof.kind in ("analyzer", "scope")
        assert 0 < prof.timeout_s <= 3600


@NORMAL
@given(data=damaged_profile())
def test_damaged_profiles(tmp_path_factory, data):
    _profile_check(tmp_path_factory, data)


# ----- IEEE 488.2 blocks and ASCII replies ---------------------------------------------------
@st.composite
def blocks(draw):
    enc = draw(st.sampled_from(BINARY))
    order = draw(st.sampled_from(BYTE_ORDERS))
    n = draw(st.integers(0, 300))
    rng = np.random.default_rng(draw(st.integers(0, 2**32 - 1)))
    if enc in _LIMITS:
        vals = rng.integers(-_LIMITS[enc], _LIMITS[enc], n)
    else:
        vals = rng.normal(0, 1e3, n).astype(np.float32 if enc == "real32" else np.float64)
    return enc, order, vals


@NORMAL
@given(case=blocks(), term=st.sampled_from([b"", b"\n"]))
def test_blocks_round_trip(case, term):
    enc, order, vals = case
    out = parse_block(build_block(vals, enc, order) + term, enc, order)
    np.testing.assert_array_equal(out, np.asarray(vals, dtype=out.dtype))


def _block_check(data, enc, order):
    try:
        out = parse_block(data, enc, order)
    except InstrumentError as e:
        assert str(e).strip() and "reply" in str(e)
        return
    assert out.ndim == 1


@NORMAL
@given(data=st.data(), case=blocks())
def test_damaged_blocks(data, case):
    enc, order, vals = case
    damaged = data.draw(mutation(build_block(vals, enc, order) + b"\n"))
    _block_check(damaged, data.draw(st.sampled_from(BINARY)), order)


@NORMAL
@given(raw=st.binary(max_size=64), enc=st.sampled_from(BINARY), order=st.sampled_from(BYTE_ORDERS))
def test_random_bytes_as_block(raw, enc, order):
    _block_check(raw, enc, order)
    _block_check(b"#" + raw, enc, order)


@NORMAL
@given(data=st.data(), vals=st.lists(st.floats(allow_nan=False, allow_infinity=False, width=64), max_size=50))
def test_ascii_replies(data, vals):
    text = encode_ascii(vals)
    if vals:
        np.testing.assert_allclose(parse_ascii(text), vals, rtol=1e-11)
    damaged = data.draw(mutation(text + b"\n"))
    try:
        out = parse_ascii(damaged)
    except InstrumentError as e:
        assert "reply" in str(e)
        return
    assert out.ndim == 1


# ----- `make fuzz` ---------------------------------------------------------------------------
@pytest.mark.fuzz
@FUZZ
@given(data=damaged_profile())
def test_damaged_profiles_fuzz(tmp_path_factory, data):
    _profile_check(tmp_path_factory, data)


@pytest.mark.fuzz
@FUZZ
@given(data=st.data(), case=blocks())
def test_damaged_blocks_fuzz(data, case):
    test_damaged_blocks.hypothesis.inner_test(data, case)


@pytest.mark.fuzz
@FUZZ
@given(raw=st.binary(max_size=64), enc=st.sampled_from(BINARY), order=st.sampled_from(BYTE_ORDERS))
def test_random_bytes_as_block_fuzz(raw, enc, order):
    _block_check(raw, enc, order)
    _block_check(b"#" + raw, enc, order)


@pytest.mark.fuzz
@FUZZ
@given(data=st.data(), vals=st.lists(st.floats(allow_nan=False, allow_infinity=False, width=64), max_size=50))
def test_ascii_replies_fuzz(data, vals):
    test_ascii_replies.hypothesis.inner_test(data, vals)
