"""The capture file on disk: its header and rows, the manifest beside it, and the one
rule a resumed capture continues by (:func:`resume_offset`).

See :mod:`benchfit.bench.capture` for the order of writes these read back.
"""

from __future__ import annotations

import json
import os
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from benchfit.data.canonical import SWEEP_MAGIC
from benchfit.errors import InputError
from benchfit.fileio import check_output_path
from benchfit.provenance import Provenance


def manifest_path(out: str | os.PathLike) -> Path:
    """Where the manifest of capture ``out`` lives."""
    return Path(str(out) + ".capture.json")


def _row(f: float, h: complex) -> str:
    return f"{f:.12e},{h.real:.12e},{h.imag:.12e}"


def _header_text(meta: dict[str, Any], prov: Provenance, quantity: str) -> str:
    # The canonical sweep header (benchfit.data.canonical), written before any row.
    return (f"{SWEEP_MAGIC}\n# quantity: {quantity}\n# meta: {json.dumps(meta, default=str)}\n"
            f"# provenance: {json.dumps(prov.to_dict(), default=str)}\nfreq_hz,re,im\n")


@dataclass(frozen=True)
class CaptureFile:
    """What is in a capture file, read line by line the way it was written.

    Attributes
    ----------
    meta
        The ``# meta:`` object of the header (settings, instrument, ``complete``).
    header_end
        Byte offset just after the column-name line.
    row_ends
        Byte offset just after each complete row, in order.
    row_freqs
        Frequency of each complete row, Hz.
    size
        Bytes in the file; past ``row_ends[-1]`` (or ``header_end``) is a torn or foreign tail.
    """

    meta: dict[str, Any]
    header_end: int
    row_ends: tuple[int, ...]
    row_freqs: tuple[float, ...]
    size: int

    @property
    def rows(self) -> int:
        return len(self.row_ends)


def scan_capture_file(path: str | os.PathLike) -> CaptureFile:
    """Read the header and every complete row of a capture file (finished or not).

    A row is complete when its line ends in a newline and holds three finite numbers with
    a frequency above the previous row's; the scan stops at the first line that is not one.

    Raises
    ------
    InputError
        The file is not a capture file (no canonical sweep header with a meta line).
    """
    path = check_output_path(path)  # a regular file: reading a pipe would wait forever
    try:
        data = path.read_bytes()
    except OSError as e:
        raise InputError(f"cannot read: {e.strerror}", source=str(path)) from None
    lines = data.split(b"\n")
    if not lines or lines[0].rstrip(b"\r").decode("utf-8", "replace") != SWEEP_MAGIC:
        raise InputError("not a capture file (no benchfit sweep header); it is left as it is",
                         source=str(path))
    meta: dict[str, Any] | None = None
    offset = 0
    for i, raw in enumerate(lines[:-1]):
        offset += len(raw) + 1
        text = raw.decode("utf-8", "replace")
        if text.startswith("# meta: "):
            try:
                meta = json.loads(text[len("# meta: "):])
            except (ValueError, RecursionError):
                meta = None
        if text.strip() == "freq_hz,re,im":
            header_end, first = offset, i + 1
            break
        if not text.startswith("#"):
            break
    else:
        first = None
    if first is None or not isinstance(meta, dict):
        raise InputError("capture file has no complete header (column names and meta line); "
                         "it is left as it is", source=str(path))
    ends: list[int] = []
    freqs: list[float] = []
    for raw in lines[first:-1]:  # the last piece has no newline after it: never a complete row
        try:
            f, re_, im = (float(c) for c in raw.decode("ascii").split(","))
        except (ValueError, UnicodeDecodeError):
            break
        if not (np.isfinite(f) and np.isfinite(re_) and np.isfinite(im) and f > 0) or \
                (freqs and f <= freqs[-1]):
            break
        offset += len(raw) + 1
        ends.append(offset)
        freqs.append(f)
    return CaptureFile(meta=meta, header_end=header_end, row_ends=tuple(ends),
                       row_freqs=tuple(freqs), size=len(data))


def resume_offset(scan: CaptureFile, rows_acknowledged: int, last_freq_hz: float | None,
                  source: str) -> int:
    """Byte offset a resumed capture continues from: just after the last acknowledged row.

    The evidence is the manifest's row count (written only after those rows were fsync'd)
    and its last frequency, checked against the rows the file really holds.  The offset is
    never before an acknowledged row: when the file holds fewer complete rows than were
    acknowledged, or its last acknowledged row is not at the recorded frequency, the file was
    changed after the capture and nothing is cut (InputError).  Rows after that (written but
    never acknowledged) and a torn last line lie after the offset and are measured again.
    The header's size plays no part, so a header rewritten at the end cannot move the cut.
    """
    n = int(rows_acknowledged)
    if scan.rows < n:
        raise InputError(f"holds {scan.rows} complete rows but {n} were saved by the capture; "
                         "it was changed afterwards, so it is not resumed (nothing was cut)",
                         source=source)
    if n == 0:
        return scan.header_end
    f = scan.row_freqs[n - 1]
    if last_freq_hz is None or not np.isclose(f, float(last_freq_hz), rtol=1e-9, atol=0.0):
        raise InputError(f"row {n} is at {f:g} Hz but the capture saved {last_freq_hz} Hz there; "
                         "it was changed afterwards, so it is not resumed (nothing was cut)",
                         source=source)
    return scan.row_ends[n - 1]


