"""Plain-data (JSON) form of the step layer's flat result dataclasses.

The measurement and estimate records hold only floats, ints, strings, tuples of
those and a provenance; one pair of functions converts all of them, driven by
the dataclass fields, so their JSON form cannot drift from their definition.
"""

from __future__ import annotations

from dataclasses import MISSING, fields
from typing import Any

from benchfit.errors import InputError
from benchfit.fileio import as_float
from benchfit.provenance import Provenance

_CONVERT = {
    "float": as_float,
    "int": int,
    "str": str,
    "tuple[float, ...]": lambda v: tuple(as_float(x) for x in v),
    "tuple[str, ...]": lambda v: tuple(str(x) for x in v),
    "Provenance": Provenance.from_dict,
}


def record_to_dict(obj: Any, kind: str) -> dict[str, Any]:
    """``{"kind": kind, field: value...}`` with tuples as lists and the provenance as a dict."""
    d: dict[str, Any] = {"kind": kind}
    for f in fields(obj):
        v = getattr(obj, f.name)
        d[f.name] = v.to_dict() if isinstance(v, Provenance) else list(v) if isinstance(v, tuple) else v
    return d


def record_from_dict(cls: type, d: dict[str, Any], what: str):
    """Inverse of :func:`record_to_dict`; a missing required field is an :class:`InputError`."""
    if not isinstance(d, dict):
        raise InputError(f"expected a {what} object")
    kw = {}
    for f in fields(cls):
        if f.name not in d:
            if f.default is MISSING and f.default_factory is MISSING:
                raise InputError(f"{what} has no {f.name!r}")
            continue
        kw[f.name] = _CONVERT[str(f.type)](d[f.name])
    return cls(**kw)
