"""Loading a text export and sniffing its dialect (separator and decimal mark).

Shared by the sweep reader and the trace reader.  The separator (comma,
semicolon, tab or whitespace) and decimal mark ('.' or ',') are chosen as the
pair under which the numeric-looking lines split into the most consistent
all-numeric rows.  :mod:`benchfit.data.table` then finds the numeric blocks.
"""

from __future__ import annotations

import csv
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


#: Cell values a spreadsheet writes where a formula failed ('#N/A', '#VALUE!', ...): a row
#: that starts with one is a broken data row, not a '#' comment.
SPREADSHEET_ERRORS = ("#N/A", "#VALUE!", "#DIV/0!", "#NUM!", "#REF!", "#NAME?", "#NULL!")
_SPREADSHEET_ERROR = re.compile(r"""^["']?(?:#N/A|#VALUE!|#DIV/0!|#NUM!|#REF!|#NAME\?|#NULL!)""",
                                re.IGNORECASE)


def is_spreadsheet_error(stripped: str) -> bool:
    """True when a line starts with a spreadsheet error value such as '#N/A'."""
    return bool(_SPREADSHEET_ERROR.match(stripped))


def is_comment(stripped: str) -> bool:
    """True for a comment line ('#', '!', '%', '//' or '*' first), but not a '#N/A' row."""
    return stripped.startswith(COMMENT_MARKS) and not is_spreadsheet_error(stripped)


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
        """Cells of one line (quotes and surrounding blanks removed, trailing empties dropped).

        A double-quoted cell may hold the separator (``"1,000.50",-3.2``).
        """
        if self.separator == "whitespace":
            cells = line.split()
        elif '"' in line:
            try:
                cells = next(csv.reader([line.strip()], delimiter=self.separator,
                                        skipinitialspace=True))
            except (csv.Error, StopIteration):
                cells = line.strip().split(self.separator)
            cells = [c.strip().strip('"').strip("'").strip() for c in cells]
        else:
            cells = [c.strip().strip('"').strip("'").strip() for c in line.strip().split(self.separator)]
        while cells and cells[-1] == "":
            cells.pop()
        return cells

    @property
    def thousands(self) -> str:
        """The thousands separator this dialect allows inside a number: the other mark."""
        return "," if self.decimal == "." else "."

    def number(self, cell: str, grouping: bool = True) -> float:
        """One cell as a float; ValueError when it is not a number.

        Digits grouped in threes by the other mark (``1,000.50`` with a decimal point,
        ``1.000,50`` with a decimal comma) are read as thousands separators, unless
        ``grouping`` is False (the sniffer's strict reading, so that '12,345' cannot make
        a decimal-point reading of a decimal-comma file look as good as the right one).
        """
        c = cell.strip().strip('"').strip("'")
        if self.thousands in c:
            if not grouping:
                raise ValueError(cell)
            if not _GROUPED[self.decimal].match(c):
                raise ValueError(cell)  # e.g. a point inside a decimal-comma number
            c = c.replace(self.thousands, "")
        if self.decimal == ",":
            c = c.replace(",", ".")
        return float(c)

    def to_dict(self) -> dict[str, str]:
        return {"separator": self.separator_name, "decimal": self.decimal}

    def first_cell_pattern(self) -> re.Pattern:
        """A regex matching a line whose first cell is a number in this dialect (a data line)."""
        dm, tm = re.escape(self.decimal), re.escape(self.thousands)
        num = (rf"[+-]?(?:\d{{1,3}}(?:{tm}\d{{3}})+(?:{dm}\d*)?|\d+(?:{dm}\d*)?|{dm}\d+)"
               rf"(?:[eE][+-]?\d+)?|[+-]?(?:nan|inf|infinity)")
        if self.separator == ",":  # an unquoted comma ends the cell: no grouping there
            num = (rf"[+-]?(?:\d+(?:{dm}\d*)?|{dm}\d+)(?:[eE][+-]?\d+)?|[+-]?(?:nan|inf|infinity)")
            quoted = (rf"[+-]?(?:\d{{1,3}}(?:{tm}\d{{3}})+(?:{dm}\d*)?|\d+(?:{dm}\d*)?|{dm}\d+)"
                      rf"(?:[eE][+-]?\d+)?|[+-]?(?:nan|inf|infinity)")
        else:
            quoted = num
        end = r"\s" if self.separator == "whitespace" else rf"\s*{re.escape(self.separator)}"
        return re.compile(rf"""^\s*(?:"(?:{quoted})"|'(?:{quoted})'|(?:{num}))(?:{end}|\s*$)""",
                          re.IGNORECASE)


# A number with its digits grouped in threes: '1,000.50' (decimal point), '1.000,50' (comma).
_GROUPED = {
    ".": re.compile(r"^[+-]?\d{1,3}(?:,\d{3})+(?:\.\d*)?(?:[eE][+-]?\d+)?$"),
    ",": re.compile(r"^[+-]?\d{1,3}(?:\.\d{3})+(?:,\d*)?(?:[eE][+-]?\d+)?$"),
}


def _parses(d: Dialect, cells: list[str], grouping: bool) -> bool:
    try:
        for c in cells:
            d.number(c, grouping)
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
    # Strict numbers first; digits grouped in threes only when nothing reads without them.
    best = _best_dialect(sample, header, min_columns, grouping=False) or \
        _best_dialect(sample, header, min_columns, grouping=True)
    if best is None:
        k = first_unsplit_line(lines, head + tail[::-1], min_columns)
        text = lines[k].strip()
        raise InputError(
            f"could not split the numeric rows into {min_columns} or more columns "
            "with any separator (comma, semicolon, tab, whitespace) and decimal mark ('.' or ','); "
            f"first failing row: {text[:60]!r}" + ("..." if len(text) > 60 else ""),
            source=source, line=k + 1)
    return best


def first_unsplit_line(lines: list[str], numbered: list[int], min_columns: int) -> int:
    """The first of the sampled numeric lines that no dialect splits into ``min_columns``
    numbers (or the first sampled line, when each splits alone but not alike)."""
    for k in numbered:
        ln = lines[k].strip()
        for sep in SEPARATORS:
            for dec in (".", ","):
                d = Dialect(sep, dec)
                cells = d.split(ln)
                if len(cells) >= min_columns and _parses(d, cells, True):
                    break
            else:
                continue
            break
        else:
            return k
    return numbered[0]


def quoted_cells(sample: list[str]) -> bool:
    """True when every sampled row quotes its cells (``"12,5893","39,9993"``): only then can a
    comma-separated file carry a decimal comma, the quotes telling the two commas apart."""
    return bool(sample) and all(ln.lstrip().startswith('"') and ln.count('"') >= 4 for ln in sample)


def _best_dialect(sample: list[str], header: str | None, min_columns: int,
                  grouping: bool) -> Dialect | None:
    best: tuple[tuple[int, ...], Dialect] | None = None
    order = 0
    for sep in SEPARATORS:
        for dec in (".", ","):
            order -= 1
            if sep == "," and dec == "," and not quoted_cells(sample):
                continue
            d = Dialect(sep, dec)
            counts = Counter()
            for ln in sample:
                cells = d.split(ln)
                if _parses(d, cells, grouping):
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
    return best[1] if best else None
