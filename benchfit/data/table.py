"""The numeric blocks of a text table and the text lines above each.

Data come in *blocks*: runs of numeric rows (blank and comment lines inside are
skipped), each with the text lines above it (metadata, a title, the column
names and an optional unit row).  Rows are parsed by pandas' C parser when
the block is clean; otherwise line by line, so that the first bad cell is
reported with its file line.

Every error names the file and the 1-based line where the problem is.
"""

from __future__ import annotations

import io
import re
from collections import Counter
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from benchfit.data.dialect import Dialect, is_comment, strip_comment_mark
from benchfit.errors import InputError


@dataclass
class Block:
    """One run of numeric rows and the text above it.

    Attributes
    ----------
    data
        Values, shape (rows, columns).
    line_no
        1-based file line of each row.
    names
        Column names from the header line (None when there is none).
    units
        Unit row under the names (None when there is none).
    header_line
        1-based line of the names (None when there is none).
    header_text
        Raw text of the line just above the data when it could not serve as names.
    notes
        Other text lines above the block (metadata, title), oldest first.
    """

    data: np.ndarray
    line_no: np.ndarray
    names: list[str] | None = None
    units: list[str] | None = None
    header_line: int | None = None
    header_text: str | None = None
    notes: list[str] = field(default_factory=list)

    @property
    def title(self) -> str | None:
        return self.notes[-1] if self.notes else None


_UNIT_CELL = re.compile(
    r"^[\[(]?\s*(hz|khz|mhz|ghz|db|dbv|deg|degree|degrees|°|rad|radians|v|mv|a|ma|s|ms|us|µs|ns|"
    r"ohm|ohms|Ω|v/v|-|1|%|sa|pts)?\s*[\])]?$", re.IGNORECASE)


def _is_unit_row(cells: list[str]) -> bool:
    return bool(cells) and all(_UNIT_CELL.match(c.strip()) for c in cells) and any(c.strip() for c in cells)


def split_header(line: str, d: Dialect, ncols: int) -> list[str] | None:
    """Names from a header line, trying the splits exports use; None if none gives ``ncols``."""
    s = strip_comment_mark(line.strip())
    tries = [d.split(s)]
    if d.separator == "whitespace":
        tries.append([c for c in re.split(r"\t|\s{2,}", s) if c])
        merged: list[str] = []
        for tok in s.split():  # 'Frequency (Hz) Gain (dB)' -> units join the name before them
            if merged and re.match(r"^[\[(].*[\])]$", tok):
                merged[-1] += " " + tok
            else:
                merged.append(tok)
        tries.append(merged)
    for cells in tries:
        if len(cells) == ncols:
            return cells
    return None


def _numeric_cells(cells: list[str], d: Dialect) -> int:
    n = 0
    for c in cells:
        try:
            d.number(c)
            n += 1
        except ValueError:
            pass
    return n


def _fast_rows(texts: list[str], d: Dialect, ncols: int) -> np.ndarray | None:
    """Rows parsed by pandas' C parser; None when anything is off (the slow path then
    finds and reports the first bad cell with its line)."""
    if d.separator != "whitespace":
        texts = [t.rstrip(d.separator) for t in texts]
    try:
        frame = pd.read_csv(io.StringIO("\n".join(texts)), sep=r"\s+" if d.separator == "whitespace"
                            else d.separator, header=None, decimal=d.decimal, dtype=float,
                            engine="c", skipinitialspace=True, skip_blank_lines=False)
    except (ValueError, pd.errors.ParserError, pd.errors.EmptyDataError):
        return None
    data = frame.to_numpy(dtype=float)
    if data.shape != (len(texts), ncols) or not np.all(np.isfinite(data)):
        return None
    return data


def _parse_rows(rows: list[tuple[int, list[str]]], d: Dialect, ncols: int, source: str,
                names: list[str] | None) -> np.ndarray:
    """Rows of cells -> float array; the first bad row raises with its line number."""
    for ln, cells in rows:
        if len(cells) != ncols:
            raise InputError(f"{len(cells)} cells, expected {ncols} like the rows above",
                             source=source, line=ln)
    cells_all = [c for _, cells in rows for c in cells]
    try:
        if d.decimal == ",":
            if any("." in c for c in cells_all):
                raise ValueError
            cells_all = [c.replace(",", ".") for c in cells_all]
        flat = np.array(cells_all, dtype=float)
    except ValueError:
        # Slow path, cell by cell with the dialect's own rule (which also takes quoted
        # numbers): either every cell parses or the first bad one is reported.
        values = []
        for ln, cells in rows:
            for j, c in enumerate(cells):
                try:
                    values.append(d.number(c))
                except ValueError:
                    col = names[j] if names and j < len(names) else j + 1
                    raise InputError(f"non-numeric cell {c!r}; expected a number"
                                     + (" with a decimal comma" if d.decimal == "," else ""),
                                     source=source, line=ln, column=col) from None
        flat = np.array(values, dtype=float)
    data = flat.reshape(len(rows), ncols)
    bad = ~np.isfinite(data)
    if bad.any():
        i, j = np.argwhere(bad)[0]
        col = names[j] if names and j < len(names) else int(j) + 1
        raise InputError(f"value {rows[i][1][j]!r} is not finite; expected a finite number",
                         source=source, line=rows[i][0], column=col)
    return data


_DATA_FIRST = frozenset("0123456789+-.,\"'nNiI")


class _Retry(Exception):
    """The quick line classification was wrong somewhere; classify every line exactly."""


def _kinds(lines: list[str], d: Dialect, exact: bool) -> list[str]:
    """'data' / 'text' / 'blank' / 'comment' for each line.

    The quick pass looks at the first character only and checks the first and last
    line of each run with the full first-cell pattern; a wrong guess inside a run
    makes the fast parse fail, and the exact pass follows.
    """
    is_data = d.first_cell_pattern().match

    def other(raw: str) -> str:
        s = raw.strip()
        return "blank" if not s else "comment" if is_comment(s) else "text"

    if exact:
        return ["data" if is_data(raw) else other(raw) for raw in lines]
    kinds = []
    for raw in lines:
        s = raw.lstrip()
        kinds.append("data" if s and s[0] in _DATA_FIRST else other(raw))
    i, n = 0, len(lines)
    while i < n:
        if kinds[i] != "data":
            i += 1
            continue
        a = i
        while i < n and kinds[i] == "data":
            i += 1
        b = i - 1
        while a <= b and not is_data(lines[a]):
            kinds[a] = "text"
            a += 1
        while b >= a and not is_data(lines[b]):
            kinds[b] = "text"
            b -= 1
    return kinds


def find_blocks(lines: list[str], d: Dialect, source: str) -> list[Block]:
    """The numeric blocks of ``lines`` with their headers.

    A one-row block without a header is taken as metadata (e.g. ``401;points``)
    unless it is the only block.
    """
    try:
        return _blocks(lines, d, source, exact=False)
    except (_Retry, InputError):
        return _blocks(lines, d, source, exact=True)


def _blocks(lines: list[str], d: Dialect, source: str, exact: bool) -> list[Block]:
    kinds = _kinds(lines, d, exact)

    raw_blocks: list[tuple[int, list[int]]] = []  # (first line index, indices of data lines)
    i, n = 0, len(lines)
    while i < n:
        if kinds[i] != "data":
            i += 1
            continue
        start, idx = i, []
        while i < n and kinds[i] in ("data", "blank", "comment"):
            if kinds[i] == "data":
                idx.append(i)
            i += 1
        raw_blocks.append((start, idx))

    if not raw_blocks:
        raise InputError("no numeric rows; expected rows of numbers (after an optional header)",
                         source=source)

    blocks: list[Block] = []
    prev_end = 0
    for start, idx in raw_blocks:
        texts = [lines[k].strip() for k in idx]
        ncols = Counter(len(d.split(t)) for t in texts[:50]).most_common(1)[0][0]
        above = [k for k in range(prev_end, start) if kinds[k] in ("text", "comment")]
        # A text row straight after a block with a number in it is a broken data row.
        if blocks and above and kinds[above[0]] == "text":
            first = above[0]
            cells = d.split(lines[first].strip())
            if len(cells) == blocks[-1].data.shape[1] and _numeric_cells(cells, d) > 0:
                # The first cell failed the data-line pattern even when the lenient
                # per-cell rule takes it (a stray quote after the exponent, say).
                bad = next((c for c in cells if _numeric_cells([c], d) == 0), cells[0])
                raise InputError(f"non-numeric cell {bad!r}; expected a number", source=source,
                                 line=first + 1)
        names = units = None
        header_line = header_text = None
        consumed: set[int] = set()
        if above:
            last = above[-1]
            cells = split_header(lines[last], d, ncols)
            if cells is not None and _is_unit_row(cells) and len(above) >= 2:
                names_cells = split_header(lines[above[-2]], d, ncols)
                if names_cells is not None:
                    names, units, header_line = names_cells, cells, above[-2] + 1
                    consumed = {last, above[-2]}
            if names is None and cells is not None and _numeric_cells(cells, d) == 0:
                names, header_line = cells, last + 1
                consumed = {last}
            if names is None:
                header_text = strip_comment_mark(lines[last].strip())
        notes = [strip_comment_mark(lines[k].strip()) for k in above if k not in consumed]
        notes = [x for x in notes if x]
        if len(idx) == 1 and names is None and len(raw_blocks) > 1:
            prev_end = start + 1
            continue  # a lone numeric line among text: metadata
        data = _fast_rows(texts, d, ncols)
        if data is None:
            if not exact:
                raise _Retry
            rows = [(k + 1, d.split(t)) for k, t in zip(idx, texts, strict=True)]
            ncols = Counter(len(c) for _, c in rows).most_common(1)[0][0]
            data = _parse_rows(rows, d, ncols, source, names)
        blocks.append(Block(data=data, line_no=np.asarray(idx) + 1, names=names,
                            units=units, header_line=header_line, header_text=header_text,
                            notes=notes))
        prev_end = idx[-1] + 1
    if not blocks:
        raise InputError("no block of two or more numeric rows", source=source)
    return blocks
