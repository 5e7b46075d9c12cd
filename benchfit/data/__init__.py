"""Reading data: sweeps, scope traces, and the canonical files benchfit writes.

Knows nothing of fitting, loops or output.
"""

from benchfit.data.canonical import (
    read_canonical_sweep,
    read_canonical_trace,
    write_sweep_csv,
    write_trace_csv,
)
from benchfit.data.response import QUANTITIES, FrequencyResponse
from benchfit.data.trace import TimeTrace

__all__ = [
    "FrequencyResponse",
    "TimeTrace",
    "QUANTITIES",
    "write_sweep_csv",
    "write_trace_csv",
    "read_canonical_sweep",
    "read_canonical_trace",
    "read_sweep",
    "read_trace",
]


def read_sweep(path, **options):
    """Read a sweep file of any supported dialect (see :mod:`benchfit.data.sweep_reader`)."""
    from benchfit.data.sweep_reader import read_sweep as _read

    return _read(path, **options)


def read_trace(path, **options):
    """Read a scope trace file (see :mod:`benchfit.data.trace_reader`)."""
    from benchfit.data.trace_reader import read_trace as _read

    return _read(path, **options)
