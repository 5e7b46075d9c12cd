"""Production lots: fit and judge many sweeps, serially, in a process pool or on Dask.

One task (:func:`benchfit.batch.task.run_task`) turns one sweep file into one
result row; :func:`benchfit.batch.runner.run_lot` runs it over a lot and streams
the rows to a CSV; :mod:`benchfit.batch.summary` sums a lot up.
"""

from benchfit.batch.limits import Limits, judge, parse_limits, read_limits
from benchfit.batch.runner import LotRun, find_sweeps, run_lot
from benchfit.batch.summary import LotSummary, plot_histograms, summarise
from benchfit.batch.table import columns, read_table
from benchfit.batch.task import DesignLoop, TaskSettings, read_design_loop, run_task

__all__ = [
    "DesignLoop", "Limits", "LotRun", "LotSummary", "TaskSettings", "columns", "find_sweeps",
    "judge", "parse_limits", "plot_histograms", "read_design_loop", "read_limits", "read_table",
    "run_lot", "run_task", "summarise",
]
