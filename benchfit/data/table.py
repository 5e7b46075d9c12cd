"""The numeric blocks of a text table and the text lines above each.

Data come in *blocks*: runs of numeric rows (blank and comment lines inside are
skipped), each with the text lines above it (metadata, a title, the column
names and an optional unit row).  A new block starts only where a names line
stands above the numbers (stacked traces); any other line among the rows is a
row of the block that could not be read (``Marker 1: 5 kHz``, ``#N/A,#N/A``, a
row cut short), and so is a line right after the last row that has the block's
number of cells with a number among them.  Such rows go to ``Block.bad_rows``;
the readers apply the one rule of :mod:`benchfit.data.rows` to them.

Rows are parsed by pandas' C parser when the block is clean; otherwise line by
line, so that every bad row is found with its file line.
"""

from __future__ import annotations

import re
from collections import Counter
from dataclasses import dataclass, field

import numpy as np

from benchfit.data.dialect import Dialect, is_comment, is_spreadsheet_error, strip_comment_mark
from benchfit.data.quote import quote
from benchfit.data.rowparse import PANDAS_MAX_COLUMNS, fast_rows, parse_rows, row_problem
from benchfit.data.rows import BadRow, bad_row
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
    bad_rows
        Rows of the block that could not be read, in line order (see :mod:`benchfit.data.rows`).
    footer
        Text lines after the last row that are not rows (an 'end of data' line).
    footer_line
        1-based line of the first of them.
    grouped
        True when numbers with thousands separators ('1,000.50') were read.
    """

    data: np.ndarray
    line_no: np.ndarray
    names: list[str] | None = None
    units: list[str] | None = None
    header_line: int | None = None
    header_text: str | None = None
    notes: list[str] = field(default_factory=list)
    bad_rows: list[BadRow] = field(default_factory=list)
    footer: list[str] = field(default_factory=list)
    footer_line: int | None = None
    grouped: bool = False

    @property
    def rows_in_block(self) -> int:
        """Rows read plus rows that could not be read."""
        return int(self.data.shape[0]) + len(self.bad_rows)

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


def _row_like(raw: str, d: Dialect, ncols: int) -> bool:
    """A text line that is a broken row: a spreadsheet error first, or the block's number of
    cells with at least one number among them."""
    s = raw.strip()
    if is_spreadsheet_error(s):
        return True
    cells = d.split(s)
    return len(cells) == ncols and _numeric_cells(cells, d) > 0


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
    """The numeric blocks of ``lines`` with their headers and the rows that could not be read.

    A one-row block without a header is taken as metadata (e.g. ``401;points``)
    unless it is the only block.
    """
    try:
        return _blocks(lines, d, source, exact=False)
    except (_Retry, InputError):
        return _blocks(lines, d, source, exact=True)


@dataclass
class _Header:
    names: list[str] | None
    units: list[str] | None
    header_line: int | None
    header_text: str | None
    consumed: set[int]


def _header(lines: list[str], above: list[int], d: Dialect, ncols: int) -> _Header:
    """The names (and unit row) in the last lines of ``above``, if they are there."""
    if not above:
        return _Header(None, None, None, None, set())
    last = above[-1]
    if is_spreadsheet_error(lines[last].strip()):  # '#N/A,#N/A' is a broken row, not names
        return _Header(None, None, None, strip_comment_mark(lines[last].strip()), set())
    cells = split_header(lines[last], d, ncols)
    if cells is not None and _is_unit_row(cells) and len(above) >= 2:
        names_cells = split_header(lines[above[-2]], d, ncols)
        if names_cells is not None:
            return _Header(names_cells, cells, above[-2] + 1, None, {last, above[-2]})
    if cells is not None and _numeric_cells(cells, d) == 0:
        return _Header(cells, None, last + 1, None, {last})
    return _Header(None, None, None, strip_comment_mark(lines[last].strip()), set())


def _row_width(lines: list[str], idx: list[int], above: list[int], d: Dialect) -> int:
    """The number of cells the rows of a run have: the most common among its first 50, or
    a count at least half as common that the names line above it has (so that one row cut
    short at the top does not hide the header)."""
    counts = Counter(len(d.split(lines[k].strip())) for k in idx[:50]).most_common()
    top = counts[0][1]
    names_line = next((k for k in reversed(above) if not is_spreadsheet_error(lines[k].strip())), None)
    if names_line is not None:
        for width, count in counts:
            if 2 * count < top:
                break
            cells = split_header(lines[names_line], d, width)
            if cells is not None and _numeric_cells(cells, d) == 0:
                return width
    return counts[0][0]


def _under_names(lines: list[str], kinds: list[str], between: list[int], d: Dialect, ncols: int
                 ) -> tuple[list[int], list[int], _Header]:
    """Split the lines above a run into (broken rows just above it, the rest, its header).

    A line with a spreadsheet error ('#N/A,#N/A') is always a broken row; another line with
    the rows' number of cells and a number among them is one only under a names line (above
    numbers with no names, 'Start;10;Hz' is metadata).
    """
    tail: list[int] = []
    while len(tail) < len(between):
        k = between[-1 - len(tail)]
        if kinds[k] != "text" or not _row_like(lines[k], d, ncols):
            break
        tail.insert(0, k)
    above = between[:len(between) - len(tail)]
    head = _header(lines, above, d, ncols)
    if head.names is None:  # no names above: only spreadsheet errors are rows for sure
        while tail and not is_spreadsheet_error(lines[tail[0]].strip()):
            above.append(tail.pop(0))
        head = _header(lines, above, d, ncols)
    return tail, above, head


@dataclass
class _Pending:
    """A block being collected: its data lines, broken rows and the lines above."""

    idx: list[int]
    ncols: int
    above: list[int]
    head: _Header
    bad_lines: list[int] = field(default_factory=list)
    lone: bool = False  # one headerless row before any block: metadata if names follow
    scan_from: int = 0  # first line of the text above it


def _blocks(lines: list[str], d: Dialect, source: str, exact: bool) -> list[Block]:
    kinds = _kinds(lines, d, exact)

    runs: list[tuple[int, list[int]]] = []  # (first line index, indices of data lines)
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
        runs.append((start, idx))

    if not runs:
        raise InputError("no numeric rows; expected rows of numbers (after an optional header)",
                         source=source)

    blocks: list[Block] = []
    cur: _Pending | None = None
    prev_end = 0
    for start, idx in runs:
        between = [k for k in range(prev_end, start) if kinds[k] in ("text", "comment")]
        ncols = _row_width(lines, idx, between, d)
        tail, above, head = _under_names(lines, kinds, between, d, ncols)
        if cur is not None and cur.lone and head.names is not None:
            # a lone numeric line before the first names was metadata ('401;points')
            kinds[cur.idx[0]] = "text"
            between = [k for k in range(cur.scan_from, start) if kinds[k] in ("text", "comment")]
            tail, above, head = _under_names(lines, kinds, between, d, ncols)
            cur = None
        if cur is not None and head.names is None:
            # no names between two runs of rows: one block; the text lines between are broken
            # rows, and so are rows with another number of cells (a row cut short)
            cur.bad_lines.extend(k for k in between if kinds[k] == "text")
            cur.idx.extend(idx)
            cur.lone = False
            prev_end = idx[-1] + 1
            continue
        if cur is not None:
            lead = []
            for k in above:  # broken rows right after the block before belong to it
                if kinds[k] != "text" or not _row_like(lines[k], d, cur.ncols):
                    break
                lead.append(k)
            cur.bad_lines.extend(lead)
            if lead:
                above = above[len(lead):]
                head = _header(lines, above, d, ncols)
            blocks.append(_finish(cur, lines, d, exact, kinds, []))
        cur = _Pending(idx=list(idx), ncols=ncols, above=above, head=head, bad_lines=list(tail),
                       lone=not blocks and head.names is None and not tail and len(idx) == 1,
                       scan_from=prev_end)
        prev_end = idx[-1] + 1
    if cur is None:
        raise InputError("no block of two or more numeric rows", source=source)
    trailing = [k for k in range(prev_end, n) if kinds[k] == "text"]
    footer = []
    for k in trailing:  # broken rows right after the last row; from the first other text on, a footer
        if not footer and _row_like(lines[k], d, cur.ncols):
            cur.bad_lines.append(k)
        else:
            footer.append(k)
    blocks.append(_finish(cur, lines, d, exact, kinds, footer))
    return blocks


def _finish(cur: _Pending, lines: list[str], d: Dialect, exact: bool, kinds: list[str],
            footer: list[int]) -> Block:
    head = cur.head
    texts = [lines[k].strip() for k in cur.idx]
    # pandas builds one object per column: past a few dozen columns numpy is far quicker
    data = fast_rows(texts, d, cur.ncols) if cur.ncols <= PANDAS_MAX_COLUMNS else None
    if data is None and cur.ncols > PANDAS_MAX_COLUMNS:
        exact = True
    bad: list[BadRow] = []
    grouped = False
    if data is not None:
        line_no = np.asarray(cur.idx) + 1
    else:
        if not exact:
            raise _Retry
        data, line_no, bad, grouped = parse_rows(
            [(k + 1, lines[k]) for k in cur.idx], d, cur.ncols, head.names)
    for k in cur.bad_lines:
        s = lines[k].strip()
        if is_spreadsheet_error(s) or _row_like(s, d, cur.ncols):
            _, why, col = row_problem(d.split(s), d, cur.ncols, head.names)
            why = why or f"row {quote(s)} could not be read"
        else:
            why = (f"text {quote(s)} among the data rows; expected a row of {cur.ncols} numbers "
                   "like the rows around it")
            col = None
        bad.append(bad_row(k + 1, s, why, col))
    bad.sort(key=lambda b: b.line)
    notes = [strip_comment_mark(lines[k].strip()) for k in cur.above if k not in head.consumed]
    return Block(data=data, line_no=line_no, names=head.names, units=head.units,
                 header_line=head.header_line, header_text=head.header_text,
                 notes=[x for x in notes if x], bad_rows=bad,
                 footer=[x for x in (strip_comment_mark(lines[k].strip()) for k in footer) if x],
                 footer_line=footer[0] + 1 if footer else None, grouped=grouped)


def footer_warning(block: Block) -> str:
    """The warning that says text after the last row was not read (it is in the notes)."""
    n = len(block.footer)
    return (f"{n} line{'s' if n != 1 else ''} of text after the last row (from line "
            f"{block.footer_line}: {quote(block.footer[0], 40)}) {'were' if n != 1 else 'was'} not "
            "read as data; they are in the notes")
