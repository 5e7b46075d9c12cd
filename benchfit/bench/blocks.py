"""Instrument data replies: IEEE 488.2 definite-length blocks and ASCII number lists.

A definite-length arbitrary block (IEEE 488.2 §8.7.9) is::

    #<d><d digits giving N><N bytes of data>

with ``d`` a single non-zero digit.  SCPI's ``FORMat:DATA REAL,32|REAL,64``
fills the data with IEEE 754 floats and ``INTeger,8|16|32`` with signed
integers; ``FORMat:BORDer NORMal`` is most-significant byte first (big
endian), ``SWAPped`` least-significant first.

Everything here works on bytes already read; :mod:`benchfit.bench.session`
does the reading.
"""

from __future__ import annotations

import numpy as np

from benchfit.errors import InstrumentError


#: Encodings a profile may name, and the numpy item type of each.
class MalformedReply(InstrumentError):
    """A reply that does not parse: wrong block header or length, a non-number.

    Capture retries these (after resynchronising), unlike error-queue entries.
    """


ENCODINGS: dict[str, str | None] = {
    "ascii": None,
    "real32": "f4",
    "real64": "f8",
    "int8": "i1",
    "int16": "i2",
    "int32": "i4",
}

#: Byte orders a profile may name.
BYTE_ORDERS = ("big", "little")


def _dtype(encoding: str, byte_order: str) -> np.dtype:
    if encoding not in ENCODINGS or ENCODINGS[encoding] is None:
        raise ValueError(f"encoding {encoding!r} is not a binary encoding; "
                         f"expected one of {[k for k, v in ENCODINGS.items() if v]}")
    if byte_order not in BYTE_ORDERS:
        raise ValueError(f"byte order {byte_order!r}; expected one of {BYTE_ORDERS}")
    return np.dtype((">" if byte_order == "big" else "<") + ENCODINGS[encoding])


def block_header(prefix: bytes, *, what: str = "reply") -> tuple[int, int]:
    """Read the header of a definite-length block.

    Parameters
    ----------
    prefix
        The first bytes of the reply: at least ``2 + d`` of them.
    what
        Name of the reply for error messages (usually the query).

    Returns
    -------
    (header_len, payload_len)
        Bytes taken by ``#<d><digits>``, and the payload length N in bytes.

    Raises
    ------
    InstrumentError
        When the prefix is not a definite-length block header.
    """
    if len(prefix) < 2 or prefix[:1] != b"#":
        raise MalformedReply(
            f"{what}: expected an IEEE 488.2 block starting with '#', found {bytes(prefix[:16])!r}")
    d = chr(prefix[1])
    if d == "0":
        raise MalformedReply(
            f"{what}: indefinite-length block (#0) received; set the instrument to "
            "definite-length blocks")
    if d not in "123456789":  # ASCII only: str.isdigit() also accepts '¹', '٣'...
        raise MalformedReply(f"{what}: block header '#{d}': expected a digit 1-9 after '#'")
    nd = int(d)
    digits = prefix[2:2 + nd]
    if len(digits) < nd:
        raise MalformedReply(f"{what}: block header cut short after {len(prefix)} bytes")
    try:
        text = digits.decode("ascii")
        if not text.isdigit():
            raise ValueError
        n = int(text)
    except (UnicodeDecodeError, ValueError):
        raise MalformedReply(f"{what}: block length {bytes(digits)!r} is not {nd} decimal digits") from None
    return 2 + nd, n


def parse_block(data: bytes, encoding: str, byte_order: str = "big", *,
                what: str = "reply", terminator: bytes = b"\n") -> np.ndarray:
    """Decode a whole definite-length block into numbers.

    Parameters
    ----------
    data
        The reply bytes: the block, optionally followed by ``terminator``.
    encoding
        One of the binary :data:`ENCODINGS` (``real32``, ``real64``, ``int8``...).
    byte_order
        ``"big"`` (SCPI NORMal) or ``"little"`` (SCPI SWAPped).
    what
        Name of the reply for error messages.
    terminator
        Bytes allowed after the block (the message terminator).

    Returns
    -------
    numpy.ndarray
        float64 for REAL encodings, int64 for INTeger encodings.

    Raises
    ------
    InstrumentError
        Missing header, length that disagrees with the bytes received, a length
        that is not a whole number of items, or bytes left over.
    """
    dt = _dtype(encoding, byte_order)
    hlen, n = block_header(data, what=what)
    payload = data[hlen:hlen + n]
    if len(payload) < n:
        raise MalformedReply(f"{what}: block header announces {n} bytes but only "
                              f"{len(payload)} arrived")
    rest = data[hlen + n:]
    if rest and rest != terminator:
        raise MalformedReply(f"{what}: {len(rest)} unexpected bytes after a block of {n} bytes "
                              f"(starting {bytes(rest[:8])!r}); the announced length is wrong")
    if n % dt.itemsize:
        raise MalformedReply(f"{what}: block of {n} bytes is not a whole number of "
                              f"{dt.itemsize}-byte {encoding} values")
    values = np.frombuffer(bytes(payload), dtype=dt)
    # A signalling NaN in the payload sets the FPU's invalid flag on the cast; the
    # value stays NaN either way, so no warning for the user to puzzle over.
    with np.errstate(invalid="ignore"):
        out = values.astype(np.float64 if dt.kind == "f" else np.int64)
    return out


def build_block(values, encoding: str, byte_order: str = "big") -> bytes:
    """Encode numbers as a definite-length block (used by the simulator and tests)."""
    dt = _dtype(encoding, byte_order)
    payload = np.asarray(values).astype(dt).tobytes()
    digits = str(len(payload))
    if len(digits) > 9:
        raise ValueError("block too long for a definite-length header")
    return b"#" + str(len(digits)).encode() + digits.encode() + payload


def parse_ascii(text: str | bytes, *, what: str = "reply") -> np.ndarray:
    """Decode a comma-separated ASCII number list (SCPI ``FORMat:DATA ASCii``).

    Raises
    ------
    InstrumentError
        On an empty reply or a field that is not a number, naming its position.
    """
    if isinstance(text, bytes):
        try:
            text = text.decode("ascii")
        except UnicodeDecodeError:
            raise MalformedReply(f"{what}: expected ASCII numbers, found binary bytes "
                                  f"{text[:16]!r}; check the profile's data encoding") from None
    body = text.strip()
    if not body:
        raise MalformedReply(f"{what}: empty reply, expected comma-separated numbers")
    if body.startswith("#"):
        raise MalformedReply(f"{what}: a binary block arrived where ASCII numbers were expected; "
                              "check the profile's data encoding")
    fields = body.split(",")
    out = np.empty(len(fields))
    for i, f in enumerate(fields):
        try:
            out[i] = float(f)
        except ValueError:
            raise MalformedReply(f"{what}: field {i + 1} is {f.strip()[:20]!r}, expected a number") from None
    return out


def encode_ascii(values) -> bytes:
    """Comma-separated ASCII numbers with 12 significant digits (simulator side)."""
    return ",".join(f"{float(v):.12g}" for v in np.asarray(values).reshape(-1)).encode("ascii")
