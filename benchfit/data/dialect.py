"""Sniffing a text table's dialect and finding its numeric blocks.

Shared by the sweep reader and the trace reader.  A file is read as lines;
the separator (comma, semicolon, tab or whitespace) and decimal mark ('.' or
',') are chosen as the pair under which the numeric-looking lines split into
the most consistent all-numeric rows.  The data then come in *blocks*: runs of
numeric rows (blank and comment lines inside are skipped), each with the text
lines above it (metadata, a title, the column names and an optional unit row).

Every error names the file and the 1-based line where the problem is.
"""

from __future__ import annotations

import os
import re
from collections import Counter
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from benchfit.errors import InputError

SEPARATORS = ("\t", ";", ",", "whitespace")
_SEP_NAMES = {"\t": "tab", ";": "semicolon", ",": "comma", "whitespace": "whitespace"}
COMMENT_MARKS = ("#", "!", "%", "//", "*")
_NUMERIC_START = re.compile(r"""^["']?[+-]?(?:\d|[.,]\d|nan|inf)""", re.IGNORECASE)
_SAMPLE = 200  # lines from each end of the file used to sniff the dialect


def load_text(path: str | os.PathLike) -> str:
    """Read a text file: UTF-8 (with or without BOM), UTF-16 with BOM, else Latin-1.

    Raises
    ------
    InputError
        When the file is missing, a folder, binary, or empty.
    """
    source = str(path)
    try:
        raw = Path(path).read_bytes()
    except FileNotFoundError:
        raise InputError("file not found", source=source) from None
    except IsADirectoryError:
        raise InputError("is a folder, expected a data file", source=source) from None
    except OSError as e:
        raise InputError(f"cannot read: {e.strerror}", source=source) from None
    if raw.startswith((b"\xff\xfe", b"\xfe\xff")):
        text = raw.decode("utf-16")
    else:
        if b"\x00" in raw[:4096]:
            raise InputError("binary file (NUL bytes); expected a text export", source=source)
        try:
            text = raw.decode("utf-8-sig")
        except UnicodeDecodeError:
            # Windows exports often write the degree sign in Latin-1 / cp1252.
            text = raw.decode("latin-1")
    if not text.strip():
        raise InputError("file is empty; expected a header and rows of numbers", source=source)
    return text


def is_comment(stripped: str) -> bool:
    """True for a comment line ('#', '!', '%', '//' or '*' first)."""
    return stripped.startswith(COMMENT_MARKS)


def strip_comment_mark(stripped: str) -> str:
    for mark in COMMENT_MARKS:
        if stripped.startswith(mark):
            return stripped[len(mark):].strip()
    return stripped


@dataclass(frozen=True)
class Dialect:
    """How a table's cells are separated and how its decimals are written."""

    separator: str  # "\t", ";", "," or "whitespace"
    decimal: str  # "." or ","

    @property
    def separator_name(self) -> str:
        return _SEP_NAMES[self.separator]

    def split(self, line: str) -> list[str]:
        """Cells of one line (quotes and surrounding blanks removed, trailing empties dropped)."""
        if self.separator == "whitespace":
            cells = line.split()
        else:
            cells = [c.strip().strip('"').strip("'").strip() for c in line.strip().split(self.separator)]
        while cells and cells[-1] == "":
            cells.pop()
        return cells

    def number(self, cell: str) -> float:
        """One cell as a float; ValueError when it is not a number."""
        c = cell.strip().strip('"').strip("'")
        if self.decimal == ",":
            if "." in c:  # a decimal-comma file never has a point inside a number
                raise ValueError(cell)
            c = c.replace(",", ".")
        return float(c)

    def to_dict(self) -> dict[str, str]:
        return {"separator": self.separator_name, "decimal": self.decimal}


def _parses(d: Dialect, cells: list[str]) -> bool:
    try:
        for c in cells:
            d.number(c)
    except ValueError:
        return False
    return bool(cells)


def sniff(lines: list[str], source: str, *, min_columns: int = 2) -> Dialect:
    """Choose the dialect under which the numeric-looking lines split most consistently.

    Raises
    ------
    InputError
        When no line looks numeric, or no dialect gives at least ``min_columns``.
    """
    cand = [ln for ln in (x.strip() for x in lines) if ln and not is_comment(ln) and _NUMERIC_START.match(ln)]
    if not cand:
        raise InputError("no numeric rows; expected rows of numbers (after an optional header)",
                         source=source)
    sample = cand if len(cand) <= 2 * _SAMPLE else cand[:_SAMPLE] + cand[-_SAMPLE:]
    best: tuple[tuple[int, int, int], Dialect] | None = None
    order = 0
    for sep in SEPARATORS:
        for dec in (".", ","):
            order -= 1
            if sep == "," and dec == ",":
                continue
            d = Dialect(sep, dec)
            counts = Counter()
            for ln in sample:
                cells = d.split(ln)
                if _parses(d, cells):
                    counts[len(cells)] += 1
            if not counts:
                continue
            ncols, hits = counts.most_common(1)[0]
            if ncols < min_columns:
                continue
            score = (hits, ncols, order)
            if best is None or score > best[0]:
                best = (score, d)
    if best is None:
        raise InputError(
            f"could not split the numeric rows into {min_columns} or more columns with any "
            "separator (comma, semicolon, tab, whitespace) and decimal mark ('.' or ',')",
            source=source)
    return best[1]


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
        for ln, cells in rows:  # slow path: find the cell
            for j, c in enumerate(cells):
                try:
                    d.number(c)
                except ValueError:
                    col = names[j] if names and j < len(names) else j + 1
                    raise InputError(f"non-numeric cell {c!r}; expected a number"
                                     + (" with a decimal comma" if d.decimal == "," else ""),
                                     source=source, line=ln, column=col) from None
        raise  # pragma: no cover - the slow path always finds it
    data = flat.reshape(len(rows), ncols)
    bad = ~np.isfinite(data)
    if bad.any():
        i, j = np.argwhere(bad)[0]
        col = names[j] if names and j < len(names) else int(j) + 1
        raise InputError(f"value {rows[i][1][j]!r} is not finite; expected a finite number",
                         source=source, line=rows[i][0], column=col)
    return data


def find_blocks(lines: list[str], d: Dialect, source: str) -> list[Block]:
    """The numeric blocks of ``lines`` with their headers.

    A one-row block without a header is taken as metadata (e.g. ``401;points``)
    unless it is the only block.
    """
    kinds: list[str] = []
    cells_of: list[list[str] | None] = []
    for raw in lines:
        s = raw.strip()
        if not s:
            kinds.append("blank")
            cells_of.append(None)
        elif is_comment(s):
            kinds.append("comment")
            cells_of.append(None)
        elif _NUMERIC_START.match(s):
            cells = d.split(s)
            try:
                d.number(cells[0])
                kinds.append("data")
            except ValueError:
                kinds.append("text")
            cells_of.append(cells)
        else:
            kinds.append("text")
            cells_of.append(None)

    raw_blocks: list[tuple[int, list[tuple[int, list[str]]]]] = []  # (first line index, rows)
    i, n = 0, len(lines)
    while i < n:
        if kinds[i] != "data":
            i += 1
            continue
        start, rows = i, []
        while i < n and kinds[i] in ("data", "blank", "comment"):
            if kinds[i] == "data":
                rows.append((i + 1, cells_of[i]))
            i += 1
        raw_blocks.append((start, rows))

    if not raw_blocks:
        raise InputError("no numeric rows; expected rows of numbers (after an optional header)",
                         source=source)

    blocks: list[Block] = []
    prev_end = 0
    for start, rows in raw_blocks:
        ncols = Counter(len(c) for _, c in rows).most_common(1)[0][0]
        above = [k for k in range(prev_end, start) if kinds[k] in ("text", "comment")]
        # A text row straight after a block with a number in it is a broken data row.
        if blocks and above and kinds[above[0]] == "text":
            first = above[0]
            cells = d.split(lines[first].strip())
            if len(cells) == blocks[-1].data.shape[1] and _numeric_cells(cells, d) > 0:
                bad = next(c for c in cells if _numeric_cells([c], d) == 0)
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
        if len(rows) == 1 and names is None and len(raw_blocks) > 1:
            prev_end = start + 1
            continue  # a lone numeric line among text: metadata
        data = _parse_rows(rows, d, ncols, source, names)
        blocks.append(Block(data=data, line_no=np.array([r[0] for r in rows]), names=names,
                            units=units, header_line=header_line, header_text=header_text,
                            notes=notes))
        prev_end = rows[-1][0]
    if not blocks:
        raise InputError("no block of two or more numeric rows", source=source)
    return blocks
