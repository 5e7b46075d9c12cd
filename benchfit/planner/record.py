"""What an adaptive capture writes: a durable capture log and the sweep file rebuilt from it.

The **capture log** (``OUT.log.csv`` beside ``OUT.csv``) is the record: one
row per point in the order taken, appended and fsync'd before the next point
is measured (:func:`benchfit.fileio.append_lines_durable`, the same durable
append every capture uses).  Its header holds the settings as one JSON line,
so ``--resume`` can refuse a changed setting by name.  Columns::

    freq_hz,re,im,stddev,level_v,bandwidth_hz,repeats,time_s,scatter,purpose,in_sweep

``re, im`` are the mean of the point's readings, ``stddev`` its σ (complex,
of the mean), ``scatter`` the relative rms scatter of one reading, ``time_s``
the instrument time the point took and ``purpose`` why it was taken
(``coarse``, ``crossing``, ``resonance``, ``residual``, ``variance``,
``linearity``).

The **sweep file** ``OUT.csv`` is a canonical sweep CSV (with a ``stddev``
column) holding the points of the log that belong to the sweep, sorted by
frequency; it is replaced atomically after every point, so it is readable by
``fit``, ``margins`` and ``design`` at any moment.
"""

from __future__ import annotations

import json
import math
import os
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from benchfit.data.canonical import write_sweep_csv
from benchfit.data.response import FrequencyResponse
from benchfit.errors import InputError
from benchfit.fileio import append_lines_durable, write_text_atomic
from benchfit.provenance import Provenance

LOG_MAGIC = "# benchfit capture log v1"
COLUMNS = ("freq_hz", "re", "im", "stddev", "level_v", "bandwidth_hz", "repeats", "time_s", "scatter",
           "purpose", "in_sweep")
#: The option each setting comes from, for resume messages.
OPTION_OF = {"start_hz": "--start", "stop_hz": "--stop", "level_v": "--level",
             "bandwidth_hz": "--bandwidth", "min_bandwidth_hz": "--min-bandwidth",
             "pm_sigma_deg": "--pm-sigma", "gm_sigma_db": "--gm-sigma", "max_points": "--max-points",
             "max_time_s": "--max-time", "per_decade": "AdaptiveSettings.per_decade",
             "max_repeats": "AdaptiveSettings.max_repeats", "linearity": "--no-linearity-check",
             "auto_level": "--auto-level", "quantity": "--quantity"}


@dataclass(frozen=True)
class LogRow:
    """One point of the capture log (see module notes)."""

    freq_hz: float
    response: complex
    stddev: float
    level_v: float
    bandwidth_hz: float
    repeats: int
    time_s: float
    scatter: float
    purpose: str
    in_sweep: bool

    def line(self) -> str:
        h = self.response
        return (f"{self.freq_hz:.12e},{h.real:.12e},{h.imag:.12e},{self.stddev:.6e},{self.level_v:.6e},"
                f"{self.bandwidth_hz:.6e},{self.repeats:d},{self.time_s:.6e},{self.scatter:.6e},"
                f"{self.purpose},{int(self.in_sweep)}")

    @classmethod
    def parse(cls, line: str) -> LogRow:
        c = line.split(",")
        if len(c) != len(COLUMNS):
            raise ValueError(f"{len(c)} cells, expected {len(COLUMNS)}")
        return cls(freq_hz=float(c[0]), response=complex(float(c[1]), float(c[2])), stddev=float(c[3]),
                   level_v=float(c[4]), bandwidth_hz=float(c[5]), repeats=int(c[6]), time_s=float(c[7]),
                   scatter=float(c[8]), purpose=c[9], in_sweep=c[10].strip() == "1")


def log_path(out: str | os.PathLike) -> Path:
    """Where the capture log of sweep file ``out`` lives (``loop.csv`` -> ``loop.log.csv``)."""
    p = Path(out)
    return p.with_name(p.stem + ".log.csv") if p.suffix.lower() == ".csv" else Path(str(p) + ".log.csv")


def _plain(settings: dict[str, Any]) -> dict[str, Any]:
    # JSON has no inf: the header writes an unlimited budget as the string "inf"
    return {k: ("inf" if isinstance(v, float) and math.isinf(v) else v) for k, v in settings.items()}


def create_log(path: Path, settings: dict[str, Any]) -> None:
    """Start a new capture log (refused when the file exists)."""
    if path.exists():
        raise InputError("capture log exists; pass --resume to continue that capture or choose "
                         "another output file", source=str(path))
    write_text_atomic(path, f"{LOG_MAGIC}\n# settings: {json.dumps(_plain(settings))}\n"
                            + ",".join(COLUMNS) + "\n")


def append_row(path: Path, row: LogRow) -> None:
    """Append one point to the log, durably."""
    append_lines_durable(path, [row.line()])


def read_log(path: Path, settings: dict[str, Any] | None = None, *, repair: bool = False) -> list[LogRow]:
    """The rows of a capture log.

    With ``settings``, every setting must equal the log's (else an InputError
    naming the option).  With ``repair``, a torn last line (a crash mid-write)
    is cut off the file; otherwise it is an error.
    """
    if not path.exists():
        raise InputError("no capture log beside the output; nothing to resume", source=str(path))
    text = path.read_text(encoding="utf-8")
    lines = text.split("\n")
    if not lines or lines[0].strip() != LOG_MAGIC:
        raise InputError(f"first line is not {LOG_MAGIC!r}", source=str(path), line=1)
    if len(lines) < 3 or not lines[1].startswith("# settings: "):
        raise InputError("no '# settings:' line", source=str(path), line=2)
    try:
        old = json.loads(lines[1][len("# settings: "):])
    except json.JSONDecodeError:
        raise InputError("'# settings:' is not one JSON object", source=str(path), line=2) from None
    if settings is not None:
        for key, value in _plain(settings).items():
            if old.get(key) != value:
                raise InputError(f"{value!r} differs from the capture being resumed ({old.get(key)!r}); "
                                 "resume with the same settings", source=OPTION_OF.get(key, key))
    body = lines[3:]
    if not text.endswith("\n"):
        # a torn last line: its newline never reached the disk
        if not repair:
            raise InputError("the last row is incomplete", source=str(path), line=len(lines))
        keep = text[: text.rfind("\n") + 1]
        with open(path, "r+b") as fh:
            fh.truncate(len(keep.encode("utf-8")))
            fh.flush()
            os.fsync(fh.fileno())
        body = body[:-1]
    rows = []
    for k, line in enumerate(body):
        if not line.strip():
            continue
        try:
            rows.append(LogRow.parse(line))
        except ValueError as e:
            raise InputError(f"capture log row is damaged ({e})", source=str(path), line=k + 4) from None
    return rows


def sweep_rows(rows: Sequence[LogRow], level_v: float) -> list[LogRow]:
    """The rows that make the sweep: in-sweep points at ``level_v``, one per frequency (the last)."""
    by_f: dict[float, LogRow] = {}
    for r in rows:
        if r.in_sweep and math.isclose(r.level_v, level_v, rel_tol=1e-9):
            by_f[r.freq_hz] = r
    return [by_f[f] for f in sorted(by_f)]


def write_sweep(out: Path, rows: Sequence[LogRow], stddev: np.ndarray, *, quantity: str,
                meta: dict[str, Any], provenance: Provenance) -> FrequencyResponse | None:
    """Replace the sweep file with ``rows`` (sorted, at least two); returns what was written."""
    if len(rows) < 2:
        return None
    resp = FrequencyResponse(
        freq_hz=np.array([r.freq_hz for r in rows]), response=np.array([r.response for r in rows]),
        stddev=np.asarray(stddev, float), quantity=quantity, meta=meta, provenance=provenance)
    write_sweep_csv(resp, out)
    return resp
