"""What a reader understood of a file, as a plain dict (for ``inspect``, ``demo``, notebooks).

:func:`read_any` reads a file as a sweep, or as a scope trace when it has a time
column and no frequency column; :func:`summary` describes the result.
"""

from __future__ import annotations

import os
from typing import Any

import numpy as np

from benchfit.data.response import FrequencyResponse
from benchfit.data.sweep_reader import read_sweep
from benchfit.data.trace import TimeTrace
from benchfit.data.trace_reader import read_trace
from benchfit.errors import InputError

SWEEP_OPTIONS = ("columns", "trace", "freq_unit", "mag", "phase", "param", "quantity")
TRACE_OPTIONS = ("channel", "time_unit", "sample_interval_s")
#: Options both readers take (the row rule of :mod:`benchfit.data.rows`).
BOTH_OPTIONS = ("skip_bad_rows",)


def read_any(path: str | os.PathLike, **options: Any) -> FrequencyResponse | TimeTrace:
    """Read ``path`` as a sweep, or as a scope trace when its named columns are a time record.

    Parameters
    ----------
    path
        The file.
    **options
        Sweep options (see :func:`benchfit.data.read_sweep`) and trace options
        ``channel``, ``time_unit``, ``sample_interval_s`` (see :func:`benchfit.data.read_trace`).
        Options left at None are not passed on.

    Raises
    ------
    InputError
        As the sweep reader raises it, unless the file reads as a trace.
    """
    sweep_opts = {k: v for k, v in options.items() if k in SWEEP_OPTIONS and v is not None}
    trace_opts = {k: v for k, v in options.items() if k in TRACE_OPTIONS and v is not None}
    both = {k: v for k, v in options.items() if k in BOTH_OPTIONS and v is not None}
    unknown = set(options) - set(SWEEP_OPTIONS) - set(TRACE_OPTIONS) - set(BOTH_OPTIONS)
    if unknown:
        raise InputError(f"unknown option(s) {sorted(unknown)}")
    if trace_opts and not sweep_opts:
        return read_trace(path, **trace_opts, **both)
    try:
        return read_sweep(path, **sweep_opts, **both)
    except InputError as sweep_error:
        if sweep_opts:
            raise
        # A file whose named columns are a time record reads as a trace; anything the
        # trace reader would have to guess stays a sweep error.
        try:
            tr = read_trace(path, **both)
        except InputError:
            raise sweep_error from None
        if tr.meta["dialect"].get("header") == "none":
            raise sweep_error from None
        return tr


def _rng(a: np.ndarray) -> list[float]:
    return [float(np.min(a)), float(np.max(a))]


def summary(obj: FrequencyResponse | TimeTrace) -> dict[str, Any]:
    """Plain-JSON description of a sweep or trace: size, span, dialect, columns, warnings,
    rows skipped."""
    with np.errstate(all="ignore"):
        return _summary(obj)


def _summary(obj: FrequencyResponse | TimeTrace) -> dict[str, Any]:
    meta = obj.meta
    if isinstance(obj, FrequencyResponse):
        return {
            "kind": "sweep",
            "source": obj.provenance.sources[0] if obj.provenance.sources else None,
            "points": len(obj),
            "f_min_hz": obj.f_min_hz,
            "f_max_hz": obj.f_max_hz,
            "quantity": obj.quantity,
            "columns": meta.get("columns", []),
            "dialect": meta.get("dialect", {}),
            "warnings": list(meta.get("warnings", [])),
            "mag_db_range": _rng(obj.mag_db),
            "magnitude_range": _rng(obj.magnitude),
            "phase_deg_range": _rng(obj.phase_deg),
            "has": {k: getattr(obj, k) is not None for k in ("stddev", "weight", "coherence")},
            "notes": list(meta.get("notes", [])),
            "skipped_rows": list(meta.get("skipped_rows", [])),
        }
    units = meta.get("units", {})
    return {
        "kind": "trace",
        "source": obj.provenance.sources[0] if obj.provenance.sources else None,
        "samples": len(obj),
        "t_start_s": float(obj.time_s[0]),
        "t_end_s": float(obj.time_s[-1]),
        "sample_interval_s": obj.sample_interval_s,
        "channels": {n: {"unit": units.get(n, "V"), "range": _rng(v)} for n, v in obj.channels.items()},
        "columns": ["time_s", *obj.names],
        "dialect": meta.get("dialect", {}),
        "warnings": list(meta.get("warnings", [])),
        "notes": list(meta.get("notes", [])),
        "skipped_rows": list(meta.get("skipped_rows", [])),
    }
