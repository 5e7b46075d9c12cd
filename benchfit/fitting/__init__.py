"""Fitting: vector fitting, delay estimate, order choice, least-squares refinement.

Knows nothing of loops, compensation or output.
"""

from benchfit.fitting.model import PlantModel

__all__ = ["PlantModel", "fit"]


def fit(resp, **options):
    """Fit a pole/zero model to a measured response (see :mod:`benchfit.fitting.api`)."""
    from benchfit.fitting.api import fit as _fit

    return _fit(resp, **options)
