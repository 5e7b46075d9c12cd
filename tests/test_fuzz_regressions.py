"""Every failing example the fuzz campaigns found, kept so it stays fixed.

Each case names the reader, the damage and what used to happen.
"""

import pytest

from benchfit.data import read_sweep, read_trace
from benchfit.errors import InputError

CASES = [
    # read_sweep/read_trace: a UTF-16 byte-order mark followed by an odd number of bytes
    # raised UnicodeDecodeError from load_text (found by test_damaged_touchstone).
    ("utf16_odd_bytes", b"\xff\xfe!", "UTF-16"),
    ("utf16_be_truncated", b"\xfe\xff\x00", "UTF-16"),
]


@pytest.mark.parametrize("name,data,fragment", CASES, ids=[c[0] for c in CASES])
@pytest.mark.parametrize("reader", [read_sweep, read_trace], ids=["sweep", "trace"])
def test_regression(tmp_path, reader, name, data, fragment):
    p = tmp_path / f"{name}.csv"
    p.write_bytes(data)
    with pytest.raises(InputError) as e:
        reader(p)
    assert p.name in str(e.value) and fragment in str(e.value)
