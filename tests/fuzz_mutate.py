"""Test helper: the ways a file goes wrong on its way from an instrument to benchfit.

A hypothesis strategy turns valid file bytes into damaged ones: truncated,
bytes flipped, columns swapped, huge numbers, NaN/inf, empty lines, mixed
encodings, very long lines, and the shapes issue 21 found (thousands
separators, a text line among the rows, '#N/A' rows, the SCPI 9.91E37 marker,
a repeated row whose values disagree, header units nobody knows, a deeply
nested JSON line, a file with no line ends, a huge cell, a 20 000-column header).
The fuzz tests feed the result to a reader and accept either a correct result or
the project's own error, within a time and memory bound (:func:`bounded`).
"""

from __future__ import annotations

import re
import threading
import time
import tracemalloc

from hypothesis import strategies as st

from benchfit.errors import BenchfitError

_NUMBER = re.compile(rb"[-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?")
HUGE = [b"1e308", b"-1e308", b"1e309", b"-1e999", b"1e-400", b"9" * 400, b"0", b"-0", b"1e400"]
NONFINITE = [b"nan", b"NaN", b"inf", b"-inf", b"Infinity", b"-NAN", b"1.#INF", b"#N/A", b""]
SCPI = [b"9.91E+37", b"9.91E37", b"9.9E37", b"-9.9E+37"]
TEXT_LINES = [b"Marker 1: 5 kHz", b"#N/A,#N/A,#N/A", b"#N/A;#N/A;#N/A", b"#VALUE!\t#VALUE!",
              b"-- sweep paused --", b"END"]
UNIT_WORDS = [(b"(Hz)", b"(furlongs)"), (b"(deg)", b"(grad)"), (b"[Hz]", b"[rad/s]"),
              (b"(deg)", b"(rad)"), (b"(rad)", b"(deg)"), (b"(us)", b"(fortnights)")]
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


BASIC = ["truncate", "flip", "swap", "huge", "nonfinite", "empty_lines", "encoding", "long_line",
         "delete_line", "duplicate_line"]
ISSUE21 = ["thousands", "text_line", "scpi", "disagree", "unit_word", "nested_json", "no_line_ends",
           "huge_cell", "wide_header"]


@st.composite
def mutation(draw, data: bytes, seps: tuple[bytes, ...] = (b",", b";", b"\t", b" "),
             issue21: bool = False) -> bytes:
    """One to three damages applied to ``data`` (with ``issue21``, the shapes of issue 21 too:
    the data readers' tests ask for them)."""
    kinds = BASIC + ISSUE21 if issue21 else BASIC
    for _ in range(draw(st.integers(1, 3))):
        kind = draw(st.sampled_from(kinds))
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
        elif kind == "duplicate_line":
            lines = data.split(b"\n")
            k = draw(st.integers(0, len(lines) - 1))
            data = b"\n".join(lines[:k + 1] + [lines[k]] + lines[k + 1:])
        else:
            data = _issue21(draw, kind, data, n)
    return data


def _group(m: re.Match) -> bytes:
    """'1234567.5' -> '1,234,567.5' (digits grouped in threes)."""
    num = m.group(0)
    whole, _, frac = num.partition(b".")
    sign = whole[:1] if whole[:1] in (b"-", b"+") else b""
    digits = whole[len(sign):]
    groups = []
    while len(digits) > 3:
        groups.insert(0, digits[-3:])
        digits = digits[:-3]
    groups.insert(0, digits)
    return sign + b",".join(groups) + (b"." + frac if frac else b"")


def _issue21(draw, kind: str, data: bytes, n: int) -> bytes:
    """The damages issue 21 reported, each as a generated case."""
    if kind == "thousands":  # '1234.5' -> '1,234.5' in one line (or every line)
        every = draw(st.booleans())
        lines = data.split(b"\n")
        pick = range(len(lines)) if every else [draw(st.integers(0, max(len(lines) - 1, 0)))]
        for k in pick:
            lines[k] = re.sub(rb"(?<![\d.eE+-])[-+]?\d{4,}(?:\.\d+)?(?![\deE])", _group, lines[k])
        return b"\n".join(lines)
    if kind == "text_line":
        return _insert_at_line(data, draw(st.integers(0, 10_000)), draw(st.sampled_from(TEXT_LINES)))
    if kind == "scpi":
        return _replace_number(data, draw(st.integers(0, 10_000)), draw(st.sampled_from(SCPI)))
    if kind == "disagree":  # a row repeated with its other numbers moved far off
        lines = data.split(b"\n")
        k = draw(st.integers(0, max(len(lines) - 1, 0)))
        spans = [m.span() for m in _NUMBER.finditer(lines[k])]
        row = lines[k]
        for a, b in reversed(spans[1:]):
            row = row[:a] + str(float(row[a:b]) + draw(st.sampled_from([10.0, 90.0, -45.0]))).encode() + row[b:]
        return b"\n".join(lines[:k + 1] + [row] + lines[k + 1:])
    if kind == "unit_word":
        old, new = draw(st.sampled_from(UNIT_WORDS))
        return data.replace(old, new, 1)
    if kind == "nested_json":
        depth = draw(st.sampled_from([100, 2_000, 20_000]))
        line = b"# meta: " + b'{"a":' * depth + b"1" + b"}" * depth
        return _insert_at_line(data, 1, line)
    if kind == "no_line_ends":  # one line, repeated up to a few MB (a file with no line ends)
        one = data.replace(b"\r", b"").replace(b"\n", draw(st.sampled_from([b"", b" ", b","])))
        return one * min(draw(st.sampled_from([1, 50, 3_000])), max(1, 4_000_000 // max(len(one), 1)))
    if kind == "huge_cell":
        return _replace_number(data, draw(st.integers(0, 10_000)),
                               draw(st.sampled_from([b"x", b"1", b"#"])) * draw(st.sampled_from([5_000, 60_000, 200_000])))
    # wide_header: a names line of thousands of columns above the data
    cols = draw(st.sampled_from([500, 20_000]))
    sep = draw(st.sampled_from([b",", b";", b"\t"]))
    return _insert_at_line(data, 0, sep.join(b"col%d" % k for k in range(cols)))


#: Bounds per file: time (s) and traced memory above the file's own size.  Generous on
#: purpose (a loaded two-core machine); they catch runaways such as the 7 GB, 600 s read
#: of a one-line file, not ordinary slowness (benchmarks measure that).
MAX_SECONDS = 20.0
MAX_BYTES = 96 * 2**20
BYTES_PER_BYTE = 60


def bounded(call, size: int):
    """Run ``call()`` with a time and memory bound; return its result.

    Memory is what ``tracemalloc`` sees (Python objects and numpy buffers) at its peak,
    which must stay below :data:`MAX_BYTES` plus :data:`BYTES_PER_BYTE` times the file size.
    """
    started = tracemalloc.is_tracing()
    if not started:
        tracemalloc.start()
    tracemalloc.reset_peak()
    t0 = time.perf_counter()
    try:
        return call()
    finally:
        elapsed = time.perf_counter() - t0
        peak = tracemalloc.get_traced_memory()[1]
        if not started:
            tracemalloc.stop()
        assert elapsed < MAX_SECONDS, f"read took {elapsed:.1f} s for a {size}-byte file"
        limit = MAX_BYTES + BYTES_PER_BYTE * size
        # tracemalloc counts every thread's allocations: a thread another test left running
        # (a simulated instrument's socket server, a worker pool) would be charged to this read
        if threading.active_count() == 1:
            assert peak < limit, f"read peaked at {peak / 2**20:.0f} MiB for a {size}-byte file"


def mutated(valid: st.SearchStrategy[bytes]) -> st.SearchStrategy[bytes]:
    """Valid file bytes, then damaged."""
    return valid.flatmap(lambda data: mutation(data))


#: Longest error line a reader may print (a cell or header it quotes is cut).
MAX_MESSAGE = 600


def expect_own_error(call, *, names: str | None = None, size: int = 0,
                     max_message: int | None = None):
    """Run ``call()`` within :func:`bounded`; a BenchfitError is fine (and must say
    something useful, in one line), anything else fails.

    Returns the result, or None when the reader refused the input.
    ``names``: a text the error message must contain (the file name or option).
    ``size``: the file's size, for the memory bound.
    ``max_message``: longest message allowed beyond ``names`` (the data readers pass
    :data:`MAX_MESSAGE`: a quoted cell or header must be cut).
    """
    try:
        return bounded(call, size)
    except BenchfitError as e:
        msg = str(e)
        assert msg.strip(), "an error with an empty message"
        assert "Traceback" not in msg
        assert "\n" not in msg, msg[:300]
        if max_message is not None:
            assert len(msg) - len(names or "") < max_message, msg[:300] + " ..."
        if names is not None:
            assert names in msg, f"error does not name {names!r}: {msg}"
        # "useful": longer than the bare location, says what was found or expected
        assert len(msg) > len(names or "") + 10, msg
        return None
