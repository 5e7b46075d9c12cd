"""benchfit: fit bench frequency-response measurements and design loop compensation.

The package is layered; lower layers never import upper ones::

    data, bench  ->  fitting  ->  loop, steps  ->  output, cli

The names below are the notebook-level API.
"""

from __future__ import annotations

__version__ = "0.1.0"

__all__ = ["FrequencyResponse", "TimeTrace", "read_sweep", "read_trace", "fit", "__version__"]


def __getattr__(name: str):
    # Lazy so that `import benchfit` stays cheap and layers load only when used.
    if name in ("FrequencyResponse", "TimeTrace", "read_sweep", "read_trace"):
        from benchfit import data

        return getattr(data, name)
    if name == "fit":
        from benchfit.fitting import fit

        return fit
    raise AttributeError(f"module 'benchfit' has no attribute {name!r}")
