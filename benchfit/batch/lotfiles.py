"""Which files of a lot are sweeps.

A lot is a folder or a glob.  Besides the sweeps it often holds what earlier runs wrote
there (result tables, lot summaries, histogram pictures) and other files of the job; those
are skipped, each with the reason, so that a second run over the same folder sees the same
sweeps as the first.
"""

from __future__ import annotations

import glob
import json
import os
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

from benchfit.errors import InputError

#: File suffixes a sweep can have (folders and globs alike).
SWEEP_SUFFIXES = (".csv", ".tsv", ".txt", ".dat", ".s1p", ".s2p", ".json")

#: First columns of a lot's result table (benchfit.batch.table writes them).
_TABLE_HEAD = "file,unit,status,"
#: ``kind`` of benchfit JSON documents that are no sweep.
_NOT_SWEEP_KINDS = {"lot_summary", "lot_run", "design", "fit_result", "capture_manifest"}


@dataclass(frozen=True)
class LotFiles:
    """The sweeps of a lot and what was passed over.

    Parameters
    ----------
    files
        Sweep files, sorted.
    skipped
        ``(path, reason)`` of every file matched but not taken.
    """

    files: list[str]
    skipped: list[tuple[str, str]]

    def skipped_line(self, limit: int = 6) -> str:
        """One line naming what was skipped and why ('' when nothing was)."""
        if not self.skipped:
            return ""
        shown = ", ".join(f"{os.path.basename(p)} ({why})" for p, why in self.skipped[:limit])
        more = f" and {len(self.skipped) - limit} more" if len(self.skipped) > limit else ""
        return f"skipped {len(self.skipped)} file(s) that are not sweeps: {shown}{more}"


def not_a_sweep(path: str | os.PathLike) -> str | None:
    """Why a file matched by a lot's folder or glob is not a sweep, or None when it may be one.

    The evidence, cheapest first: the suffix (only :data:`SWEEP_SUFFIXES` can be sweeps);
    the first line of a CSV, which for a lot's result table starts with its fixed columns
    ``file,unit,status``; the ``kind`` of a benchfit JSON document (a lot summary, a design, a
    fit result or a capture manifest is no sweep).  Only the file's first 4 KiB are read.
    """
    p = Path(path)
    suffix = p.suffix.lower()
    if suffix not in SWEEP_SUFFIXES:
        return f"{suffix or 'no'} extension"
    try:
        with open(p, "rb") as fh:
            head = fh.read(4096)
    except OSError:
        return None  # the reader will say what is wrong with it
    text = head.decode("utf-8", errors="replace").lstrip("\ufeff")
    if suffix == ".csv" and text.startswith(_TABLE_HEAD):
        return "a lot's result table"
    if suffix == ".json":
        try:
            doc = json.loads(p.read_text(encoding="utf-8")) if p.stat().st_size < 50_000_000 else None
        except (OSError, UnicodeDecodeError, json.JSONDecodeError, RecursionError):
            return None
        kind = doc.get("kind") if isinstance(doc, dict) else None
        if kind in _NOT_SWEEP_KINDS:
            return f"a benchfit {kind.replace('_', ' ')}"
    return None


def _is_glob(spec: str) -> bool:
    return any(ch in spec for ch in "*?[")


def find_lot(spec: str | os.PathLike, exclude: Sequence[str | os.PathLike] = ()) -> LotFiles:
    """The sweep files of a lot, with the files skipped and why.

    Parameters
    ----------
    spec
        A folder (every file below it, hidden files and folders skipped), a glob pattern
        (``**`` recurses) or one file (always taken).
    exclude
        Files never taken (this run's own inputs and outputs), skipped silently.

    Raises
    ------
    InputError
        When the folder or pattern names no sweep file.
    """
    spec = str(spec)
    skip = {os.path.abspath(p) for p in exclude}
    if os.path.isdir(spec):
        found = [str(p) for p in Path(spec).rglob("*")
                 if p.is_file() and not any(part.startswith(".") for part in p.relative_to(spec).parts)]
    elif _is_glob(spec):
        found = [p for p in glob.glob(spec, recursive=True) if os.path.isfile(p)]
    elif os.path.isfile(spec):
        return LotFiles([spec], [])
    else:
        raise InputError("no such folder or file, and not a glob pattern", source=spec)
    files, skipped = [], []
    for p in sorted(found):
        if os.path.abspath(p) in skip:
            continue
        why = not_a_sweep(p)
        if why is None:
            files.append(p)
        else:
            skipped.append((p, why))
    if not files:
        extra = f"; skipped {len(skipped)} that are not sweeps" if skipped else ""
        raise InputError(f"no sweep files found (a lot takes {', '.join(SWEEP_SUFFIXES)}){extra}",
                         source=spec)
    return LotFiles(files, skipped)


def find_sweeps(spec: str | os.PathLike, exclude: Sequence[str | os.PathLike] = ()) -> list[str]:
    """The sweep files of a lot, sorted (see :func:`find_lot`, which also says what was skipped)."""
    return find_lot(spec, exclude).files
