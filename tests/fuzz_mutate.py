"""Test helper: the ways a file goes wrong on its way from an instrument to benchfit.

A hypothesis strategy turns valid file bytes into damaged ones: truncated,
bytes flipped, columns swapped, huge numbers, NaN/inf, empty lines, mixed
encodings, very long lines.  The fuzz tests feed the result to a reader and
accept either a correct result or the project's own error.
"""

from __future__ import annotations

import re

from hypothesis import strategies as st

from benchfit.errors import BenchfitError

_NUMBER = re.compile(rb"[-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?")
HUGE = [b"1e308", b"-1e308", b"1e309", b"-1e999", b"1e-400", b"9" * 400, b"0", b"-0", b"1e400"]
NONFINITE = [b"nan", b"NaN", b"inf", b"-inf", b"Infinity", b"-NAN", b"1.#INF", b"#N/A", b""]
STRANGE = ["\u00b0", "\u00b5", "\u2212", "\ufeff", "\u00e9", "\u0000", "\u202e", "\U0001f600", "\x1a"]


def _swap_columns(data: bytes, i: int, j: int, sep: bytes) -> bytes:
    out = []
    for line in data.split(b"\n"):
        cells = line.split(sep)
        if len(cells) > max(i, j):
            cells[i], cells[j] = cells[j], cells[i]
        out.append(sep.join(cells))
    return b"\n".join(out)


def _replace_number(data: bytes, k: int, new: bytes) -> bytes:
    spans = [m.span() for m in _NUMBER.finditer(data)]
    if not spans:
        return data
    a, b = spans[k % len(spans)]
    return data[:a] + new + data[b:]


def _insert_at_line(data: bytes, k: int, new: bytes) -> bytes:
    lines = data.split(b"\n")
    k %= len(lines) + 1
    return b"\n".join(lines[:k] + [new] + lines[k:])


@st.composite
def mutation(draw, data: bytes, seps: tuple[bytes, ...] = (b",", b";", b"\t", b" ")) -> bytes:
    """One to three damages applied to ``data``."""
    for _ in range(draw(st.integers(1, 3))):
        kind = draw(st.sampled_from(["truncate", "flip", "swap", "huge", "nonfinite", "empty_lines",
                                     "encoding", "long_line", "delete_line", "duplicate_line"]))
        n = max(len(data), 1)
        if kind == "truncate":
            data = data[:draw(st.integers(0, n))]
        elif kind == "flip":
            for _ in range(draw(st.integers(1, 8))):
                if not data:
                    break
                k = draw(st.integers(0, len(data) - 1))
                data = data[:k] + bytes([draw(st.integers(0, 255))]) + data[k + 1:]
        elif kind == "swap":
            i, j = draw(st.integers(0, 8)), draw(st.integers(0, 8))
            data = _swap_columns(data, i, j, draw(st.sampled_from(seps)))
        elif kind == "huge":
            data = _replace_number(data, draw(st.integers(0, 10_000)), draw(st.sampled_from(HUGE)))
        elif kind == "nonfinite":
            data = _replace_number(data, draw(st.integers(0, 10_000)), draw(st.sampled_from(NONFINITE)))
        elif kind == "empty_lines":
            for _ in range(draw(st.integers(1, 5))):
                data = _insert_at_line(data, draw(st.integers(0, 10_000)),
                                       draw(st.sampled_from([b"", b" ", b"\r", b"\t", b",,", b";;"])))
        elif kind == "encoding":
            how = draw(st.sampled_from(["latin1", "utf16", "utf16_part", "strange", "bom_middle"]))
            if how == "latin1":
                data = _insert_at_line(data, draw(st.integers(0, 10_000)), "# Phase [\u00b0] \u00b5s".encode("latin-1"))
            elif how == "utf16":
                data = b"\xff\xfe" + data.decode("latin-1").encode("utf-16-le")
            elif how == "utf16_part":
                k = draw(st.integers(0, n))
                data = data[:k] + data[k:].decode("latin-1").encode("utf-16-le")
            elif how == "strange":
                ch = draw(st.sampled_from(STRANGE)).encode("utf-8")
                k = draw(st.integers(0, n))
                data = data[:k] + ch + data[k:]
            else:
                data = _insert_at_line(data, draw(st.integers(0, 10_000)), b"\xef\xbb\xbf")
        elif kind == "long_line":
            unit = draw(st.sampled_from([b"x", b"1,", b"1;2;", b"9", b" "]))
            data = _insert_at_line(data, draw(st.integers(0, 10_000)), unit * draw(st.integers(1000, 20_000)))
        elif kind == "delete_line":
            lines = data.split(b"\n")
            if lines:
                del lines[draw(st.integers(0, len(lines) - 1))]
            data = b"\n".join(lines)
        else:
            lines = data.split(b"\n")
            k = draw(st.integers(0, len(lines) - 1))
            data = b"\n".join(lines[:k + 1] + [lines[k]] + lines[k + 1:])
    return data


def mutated(valid: st.SearchStrategy[bytes]) -> st.SearchStrategy[bytes]:
    """Valid file bytes, then damaged."""
    return valid.flatmap(lambda data: mutation(data))


def expect_own_error(call, *, names: str | None = None):
    """Run ``call()``; a BenchfitError is fine (and must say something useful), anything else fails.

    Returns the result, or None when the reader refused the input.
    ``names``: a text the error message must contain (the file name or option).
    """
    try:
        return call()
    except BenchfitError as e:
        msg = str(e)
        assert msg.strip(), "an error with an empty message"
        assert "Traceback" not in msg
        if names is not None:
            assert names in msg, f"error does not name {names!r}: {msg}"
        # "useful": longer than the bare location, says what was found or expected
        assert len(msg) > len(names or "") + 10, msg
        return None
