"""Loading a text export and sniffing its dialect (separator and decimal mark).

Shared by the sweep reader and the trace reader.  The separator (comma,
semicolon, tab or whitespace) and decimal mark ('.' or ',') are chosen as the
pair under which the numeric-looking lines split into the most consistent
all-numeric rows.  :mod:`benchfit.data.table` then finds the numeric blocks.
"""

from __future__ import annotations

import os
import re
from collections import Counter
from dataclasses import dataclass
from pathlib import Path

from benchfit.data.limits import check_text_size
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
    check_text_size(path, source)
    try:
        raw = Path(path).read_bytes()
    except FileNotFoundError:
        raise InputError("file not found", source=source) from None
    except IsADirectoryError:
        raise InputError("is a folder, expected a data file", source=source) from None
    except OSError as e:
        raise InputError(f"cannot read: {e.strerror}", source=source) from None
    if raw.startswith((b"\xff\xfe", b"\xfe\xff")):
        try:
            text = raw.decode("utf-16")
        except UnicodeDecodeError as e:
            raise InputError(f"starts with a UTF-16 byte-order mark but byte {e.start} is not "
                             "UTF-16 (truncated or damaged file)", source=source) from None
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

    def first_cell_pattern(self) -> re.Pattern:
        """A regex matching a line whose first cell is a number in this dialect (a data line)."""
        dm = re.escape(self.decimal)
        num = rf"[+-]?(?:\d+(?:{dm}\d*)?|{dm}\d+)(?:[eE][+-]?\d+)?|[+-]?(?:nan|inf|infinity)"
        end = r"\s" if self.separator == "whitespace" else rf"\s*{re.escape(self.separator)}"
        return re.compile(rf"""^\s*(?:"(?:{num})"|'(?:{num})'|(?:{num}))(?:{end}|\s*$)""",
                          re.IGNORECASE)


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
    def numeric_lines(seq):
        found = []
        for k in seq:
            ln = lines[k].strip()
            if ln and not is_comment(ln) and _NUMERIC_START.match(ln):
                found.append(k)
                if len(found) == _SAMPLE:
                    break
        return found

    head = numeric_lines(range(len(lines)))
    if not head:
        raise InputError("no numeric rows; expected rows of numbers (after an optional header)",
                         source=source)
    tail = numeric_lines(range(len(lines) - 1, head[-1], -1))
    sample = [lines[k].strip() for k in head + tail[::-1]]
    above = next((lines[k].strip() for k in range(head[0] - 1, -1, -1) if lines[k].strip()), None)
    header = strip_comment_mark(above) if above else None
    best: tuple[tuple[int, ...], Dialect] | None = None
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
            # The names line above the numbers settles ties such as '1,5' (one column with a
            # decimal comma, or two comma-separated columns).
            names = len(d.split(header)) if header else 0
            header_fits = names == ncols or (sep == "whitespace" and names > ncols)
            score = (hits, header_fits, ncols, order)
            if best is None or score > best[0]:
                best = (score, d)
    if best is None:
        raise InputError(
            f"could not split the numeric rows into {min_columns} or more columns with any "
            "separator (comma, semicolon, tab, whitespace) and decimal mark ('.' or ',')",
            source=source)
    return best[1]
