"""Rows of text to numbers: every row read, or named with its line and the reason.

:func:`fast_rows` converts a clean block at once (numpy, or pandas' C parser for
a large one); :func:`parse_rows`
reads any block, converting it at once when it can and row by row otherwise, so
that each row that cannot be read (:func:`row_problem`) is named.  Used by
:mod:`benchfit.data.table`; the rule applied to the rows named is
:mod:`benchfit.data.rows`.
"""

from __future__ import annotations

import io
import re

import numpy as np

from benchfit.data.dialect import Dialect
from benchfit.data.quote import quote
from benchfit.data.rows import BadRow, bad_row, is_marker, value_problem

#: Widest table handed to pandas' C parser (a 30 000-column line took it 7 s).
PANDAS_MAX_COLUMNS = 64
#: Smallest block (rows × columns) handed to pandas' C parser.  Below it numpy converts the
#: block in less time than importing pandas takes (0.4-1.5 s on the shared test machine;
#: numpy is about 1 µs a cell slower, so one file in a fresh process breaks even near
#: 0.4-1.2 million cells: benchmarks/row_parsers.py; the lower end is taken), and a command
#: that reads one ordinary sweep (``benchfit inspect``) does not import pandas at all.
PANDAS_MIN_CELLS = 300_000


def numbers_at_once(cells: list[list[str]], d: Dialect, ncols: int) -> np.ndarray | None:
    """Rows of cells as one float array; None when a row has another cell count, a cell is not a
    plain number in the dialect's decimal mark, or a value is not finite or is a marker."""
    if any(len(c) != ncols for c in cells):
        return None
    flat = [c for row in cells for c in row]
    try:
        if d.decimal == ",":
            if any("." in c for c in flat):
                return None
            flat = [c.replace(",", ".") for c in flat]
        data = np.array(flat, dtype=float).reshape(len(cells), ncols)
    except ValueError:
        return None
    if not np.all(np.isfinite(data)) or np.any(is_marker(data)):
        return None
    return data


def fast_rows(texts: list[str], d: Dialect, ncols: int) -> np.ndarray | None:
    """Rows converted at once; None when anything is off (the slow path then finds every bad row
    with its line).  pandas' C parser for a block of :data:`PANDAS_MIN_CELLS` or more, numpy's
    conversion below (both give the correctly rounded double of each decimal number)."""
    if len(texts) * ncols < PANDAS_MIN_CELLS:
        # the text as written (no quote removed), and only what pandas' parser takes too: a
        # quoted cell, '1_000' or non-ASCII digits (which Python's float accepts) go the slow
        # way, where they are judged and named
        if any(not t.isascii() or '"' in t or "'" in t or "_" in t for t in texts):
            return None
        sep = d.separator
        cells = [t.split() if sep == "whitespace" else [c.strip() for c in t.rstrip(sep).split(sep)]
                 for t in texts]
        return numbers_at_once(cells, d, ncols)
    import pandas as pd  # here: its import costs more than it saves on an ordinary sweep

    if d.separator != "whitespace":
        texts = [t.rstrip(d.separator) for t in texts]
    try:
        frame = pd.read_csv(io.StringIO("\n".join(texts)), sep=r"\s+" if d.separator == "whitespace"
                            else d.separator, header=None, decimal=d.decimal, dtype=float,
                            engine="c", skipinitialspace=True, skip_blank_lines=False,
                            na_filter=False)
    except (ValueError, pd.errors.ParserError, pd.errors.EmptyDataError):
        return None
    data = frame.to_numpy(dtype=float)
    if data.shape != (len(texts), ncols) or not np.all(np.isfinite(data)) or np.any(is_marker(data)):
        return None
    return data


def _column(names: list[str] | None, j: int) -> str | int:
    return names[j] if names and j < len(names) else j + 1


def row_problem(cells: list[str], d: Dialect, ncols: int,
                 names: list[str] | None) -> tuple[list[float] | None, str | None, str | int | None]:
    """(values, None, None) for a good row, else (None, why, column)."""
    if len(cells) != ncols:
        grouped = d.separator == "," and any(
            re.fullmatch(r"[+-]?\d{1,3}", a) and re.fullmatch(r"\d{3}(?:\.\d*)?", b)
            for a, b in zip(cells, cells[1:], strict=False))
        return None, (f"{len(cells)} cells, expected {ncols} like the other rows"
                      + (" (a thousands separator in a comma-separated file? quote such numbers"
                         " or export them without one)" if grouped and len(cells) > ncols else "")), None
    values = []
    for j, c in enumerate(cells):
        try:
            v = d.number(c)
        except ValueError:
            return None, (f"non-numeric cell {quote(c)}; expected a number"
                          + (" with a decimal comma" if d.decimal == "," else "")), _column(names, j)
        why = value_problem(c, v)
        if why:
            return None, why, _column(names, j)
        values.append(v)
    return values, None, None


def parse_rows(rows: list[tuple[int, str]], d: Dialect, ncols: int, names: list[str] | None
                ) -> tuple[np.ndarray, np.ndarray, list[BadRow], bool]:
    """Rows of text -> (values of the good rows, their lines, the bad rows, thousands seen).

    The whole block is converted at once when it can be; otherwise row by row, so that
    each row that cannot be read is named with its line and the reason.
    """
    split = [(ln, raw, d.split(raw)) for ln, raw in rows]
    data = numbers_at_once([c for _, _, c in split], d, ncols)
    if data is not None:
        return data, np.array([ln for ln, _, _ in split], dtype=int), [], False
    good, lines, bad, grouped = [], [], [], False
    for ln, raw, cells in split:
        values, why, col = row_problem(cells, d, ncols, names)
        if why is not None:
            bad.append(bad_row(ln, raw, why, col))
            continue
        grouped = grouped or any(d.thousands in c for c in cells)
        good.append(values)
        lines.append(ln)
    data = np.array(good, dtype=float).reshape(len(good), ncols)
    return data, np.array(lines, dtype=int), bad, grouped
