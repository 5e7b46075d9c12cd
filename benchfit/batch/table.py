"""The result table of a lot: fixed columns, one CSV line per sweep, Parquet at the end.

Rows are plain dicts.  The CSV form is written one line at a time as sweeps
finish (so a killed lot keeps every finished row); the column order is fixed
for a lot: the base columns below, then one ``param:<name>`` column per
parameter the user asked for (the names in the limits file and ``--param``).
Floats are written with ``repr`` so a row read back is the same number.
"""

from __future__ import annotations

import csv
import io
import math
import os
from collections.abc import Iterable, Sequence
from pathlib import Path
from typing import Any

from benchfit.errors import InputError
from benchfit.fileio import read_text, write_bytes_atomic

#: Base columns and their types (str, int, float, bool), in file order.
BASE_COLUMNS: tuple[tuple[str, type], ...] = (
    ("file", str),                # the sweep file, as found
    ("unit", str),                # unit identity (header meta, else file name)
    ("status", str),              # pass | fail | measured | error
    ("reason", str),              # failed limits, "; "-separated
    ("error", str),               # the error text of a file that could not be judged
    ("quantity", str),            # plant | loop | ... as read
    ("points", int),
    ("f_min_hz", float),
    ("f_max_hz", float),
    ("margins_from", str),        # data (loop sweep) | model (fit x design) | "" (none)
    ("phase_margin_deg", float),
    ("crossover_hz", float),
    ("gain_margin_db", float),
    ("phase_crossover_hz", float),
    ("delay_margin_s", float),
    ("modulus_margin", float),
    ("modulus_freq_hz", float),
    ("gain_crossings", int),      # times |T| crosses 1 (more than one: conditionally stable)
    ("crossings", str),           # every crossing, JSON [[kind, freq_hz, margin, main], ...]
    ("closed_loop_stable", bool),
    ("fit_order", int),
    ("fit_delay_s", float),
    ("fit_rms_db", float),
    ("fit_rms_deg", float),
    ("fit_max_db", float),
    ("fit_reduced_chi2", float),
    ("fit_converged", bool),
    ("warnings", str),            # fit and margin warnings, "; "-separated
    ("parameters", str),          # every fitted parameter, JSON {name: [value, stderr, unit]}
)

PARAM_PREFIX = "param:"


def columns(param_names: Iterable[str] = ()) -> list[str]:
    """The column order of a lot that reports the given fitted parameters."""
    extra = [PARAM_PREFIX + n for n in dict.fromkeys(param_names)]
    return [c for c, _ in BASE_COLUMNS] + extra


def column_type(name: str) -> type:
    """Type of a column (``param:*`` columns are floats)."""
    return _TYPES.get(name, float if name.startswith(PARAM_PREFIX) else str)


_TYPES = dict(BASE_COLUMNS)


def _cell(value: Any) -> str:
    if value is None:
        return ""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float):
        return "" if math.isnan(value) else repr(value)
    if isinstance(value, int):
        return str(value)
    return str(value)


def _csv_line(cells: Sequence[str]) -> str:
    buf = io.StringIO()
    csv.writer(buf, lineterminator="\n").writerow(cells)
    return buf.getvalue()


def header_line(cols: Sequence[str]) -> str:
    """The CSV header line (with its newline)."""
    return _csv_line(cols)


def format_row(row: dict[str, Any], cols: Sequence[str]) -> str:
    """One row as a CSV line in column order ``cols`` (missing keys are empty)."""
    unknown = set(row) - set(cols)
    if unknown:  # a programming error, not a user one: the task and the table disagree
        raise KeyError(f"row has columns not in the table: {sorted(unknown)}")
    return _csv_line([_cell(row.get(c)) for c in cols])


def parse_cell(text: str, typ: type) -> Any:
    """Inverse of the cell formatting: '' -> None, typed otherwise."""
    if text == "":
        return None
    if typ is bool:
        return text == "true"
    if typ is int:
        return int(text)
    if typ is float:
        return float(text)
    return text


def repair_torn_tail(path: str | os.PathLike) -> int:
    """Cut a last line that a killed run left without its newline.

    Returns
    -------
    int
        Number of bytes removed (0 when the file ended cleanly).
    """
    p = Path(path)
    size = p.stat().st_size
    if size == 0:
        return 0
    with open(p, "rb+") as fh:
        fh.seek(-1, os.SEEK_END)
        if fh.read(1) == b"\n":
            return 0
        # walk back to the last newline in blocks
        pos = size
        keep = 0
        while pos > 0:
            step = min(65536, pos)
            pos -= step
            fh.seek(pos)
            block = fh.read(step)
            nl = block.rfind(b"\n")
            if nl >= 0:
                keep = pos + nl + 1
                break
        fh.truncate(keep)
        fh.flush()
        os.fsync(fh.fileno())
    return size - keep


def read_table(path: str | os.PathLike) -> tuple[list[str], list[dict[str, Any]]]:
    """Read a result CSV back: its columns and typed rows.

    Raises
    ------
    InputError
        When the file is not a result table (first column not ``file``) or a
        line has the wrong number of cells.
    """
    text = read_text(path, expected="a result table (CSV)")
    reader = csv.reader(io.StringIO(text))
    try:
        cols = next(reader)
    except StopIteration:
        return [], []
    if not cols or cols[0] != "file":
        raise InputError(f"first column is {cols[:1]}; expected a benchfit result table "
                         "starting with 'file'", source=str(path), line=1)
    types = [column_type(c) for c in cols]
    rows = []
    for cells in reader:
        if not cells:
            continue
        if len(cells) != len(cols):
            raise InputError(f"{len(cells)} cells, expected {len(cols)}", source=str(path),
                             line=reader.line_num)
        try:
            rows.append({c: parse_cell(v, t) for c, v, t in zip(cols, cells, types, strict=True)})
        except ValueError as e:
            raise InputError(f"bad cell ({e})", source=str(path), line=reader.line_num) from None
    return cols, rows


def to_frame(cols: Sequence[str], rows: Sequence[dict[str, Any]]):
    """A pandas DataFrame of the rows with one dtype per column (nullable ints/bools)."""
    import pandas as pd

    data = {}
    for c in cols:
        t = column_type(c)
        vals = [r.get(c) for r in rows]
        if t is float:
            data[c] = pd.array([math.nan if v is None else v for v in vals], dtype="float64")
        elif t is int:
            data[c] = pd.array(vals, dtype="Int64")
        elif t is bool:
            data[c] = pd.array(vals, dtype="boolean")
        else:
            data[c] = pd.array(["" if v is None else v for v in vals], dtype="string")
    return pd.DataFrame(data, columns=list(cols))


def write_parquet(cols: Sequence[str], rows: Sequence[dict[str, Any]], path: str | os.PathLike) -> Path:
    """Write the rows as a Parquet file, atomically (needs pyarrow, ``benchfit[parquet]``)."""
    try:
        import pyarrow  # noqa: F401
    except ImportError:
        raise InputError("writing Parquet needs the 'pyarrow' package "
                         "(pip install 'benchfit[parquet]'); or write CSV", source="-o") from None
    frame = to_frame(cols, rows)
    buf = io.BytesIO()
    frame.to_parquet(buf, index=False)
    return write_bytes_atomic(path, buf.getvalue())
