"""Predicted curves as plain CSV (one curve per file), written atomically.

A frequency-domain curve (loop gain, closed loop, output impedance) is
written as::

    # benchfit curve v1
    # name: loop gain (snapped parts)
    # unit: 1
    # provenance: {...}
    freq_hz,re,im,magnitude,mag_db,phase_deg

and a time-domain curve (step, load step) as ``time_s,value``.  ``magnitude``
is in the curve's unit (1 for a ratio, ohm for an impedance); ``mag_db`` is
20·log10 of it (dBΩ for an impedance).  The phase is unwrapped.
"""

from __future__ import annotations

import io
import json
import os
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from benchfit.errors import InputError
from benchfit.fileio import decode_complex, encode_complex, write_text_atomic
from benchfit.provenance import Provenance

CURVE_MAGIC = "# benchfit curve v1"
_AXES = ("freq_hz", "time_s")


@dataclass(frozen=True, eq=False)
class Curve:
    """One predicted curve.

    Parameters
    ----------
    name
        What the curve is, e.g. ``"closed loop (snapped parts)"``.
    x_name
        ``"freq_hz"`` (then ``y`` is complex) or ``"time_s"`` (``y`` real).
    x
        Frequencies in Hz or times in s, strictly increasing.
    y
        Values: complex response, or the time waveform.
    unit
        Unit of ``y``: ``"1"`` for a ratio, ``"ohm"``, ``"V"``, ``"A"``.
    provenance
        What produced the curve.
    """

    name: str
    x_name: str
    x: np.ndarray
    y: np.ndarray
    unit: str = "1"
    provenance: Provenance = field(default_factory=lambda: Provenance(step="curve"))

    def __post_init__(self) -> None:
        if self.x_name not in _AXES:
            raise InputError(f"curve axis {self.x_name!r}; expected one of {_AXES}")
        x = np.asarray(self.x, dtype=float).reshape(-1)
        y = np.asarray(self.y, dtype=complex if self.x_name == "freq_hz" else float).reshape(-1)
        if x.shape != y.shape or x.size < 2:
            raise InputError(f"curve {self.name!r}: {x.size} x values and {y.size} y values; "
                             "expected equal counts of at least 2")
        if np.any(np.diff(x) <= 0) or not np.all(np.isfinite(x)):
            raise InputError(f"curve {self.name!r}: {self.x_name} must be finite and strictly increasing")
        x.setflags(write=False)
        y.setflags(write=False)
        object.__setattr__(self, "x", x)
        object.__setattr__(self, "y", y)

    @property
    def is_frequency(self) -> bool:
        return self.x_name == "freq_hz"

    def columns(self) -> dict[str, np.ndarray]:
        """The CSV columns by name, in order."""
        if not self.is_frequency:
            return {"time_s": self.x, "value": self.y}
        mag = np.abs(self.y)
        with np.errstate(divide="ignore"):
            db = 20.0 * np.log10(mag)
        return {"freq_hz": self.x, "re": self.y.real, "im": self.y.imag, "magnitude": mag,
                "mag_db": db, "phase_deg": np.degrees(np.unwrap(np.angle(self.y)))}

    def csv_text(self) -> str:
        """The CSV text of the curve (13 significant digits)."""
        cols = self.columns()
        buf = io.StringIO()
        buf.write(CURVE_MAGIC + "\n")
        buf.write(f"# name: {_one_line(self.name)}\n")
        buf.write(f"# unit: {_one_line(self.unit)}\n")
        buf.write("# provenance: " + json.dumps(self.provenance.to_dict(), default=str) + "\n")
        buf.write(",".join(cols) + "\n")
        np.savetxt(buf, np.column_stack(list(cols.values())), delimiter=",", fmt="%.12e")
        return buf.getvalue()

    def to_dict(self) -> dict[str, Any]:
        return {"kind": "curve", "name": self.name, "x_name": self.x_name, "x": self.x.tolist(),
                "y": encode_complex(self.y) if self.is_frequency else self.y.tolist(),
                "unit": self.unit, "provenance": self.provenance.to_dict()}

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> Curve:
        if not isinstance(d, dict) or not {"name", "x_name", "x", "y"} <= set(d):
            raise InputError("expected a curve object with name, x_name, x and y")
        y = decode_complex(d["y"], what="y") if d["x_name"] == "freq_hz" else d["y"]
        return cls(name=str(d["name"]), x_name=str(d["x_name"]), x=d["x"], y=y,
                   unit=str(d.get("unit", "1")), provenance=Provenance.from_dict(d.get("provenance")))


def _one_line(text: str) -> str:
    # A newline in a name would end the header comment and start a data row.
    return " ".join(str(text).split())


def write_curve_csv(curve: Curve, path: str | os.PathLike) -> Path:
    """Write ``curve`` as CSV at ``path`` atomically; returns the path."""
    return write_text_atomic(path, curve.csv_text())


def read_curve_csv(path: str | os.PathLike) -> Curve:
    """Read a curve CSV written by :func:`write_curve_csv`."""
    source = str(path)
    try:
        lines = Path(path).read_text(encoding="utf-8").splitlines()
    except OSError as e:
        raise InputError(f"cannot read: {e.strerror}", source=source) from None
    if not lines or lines[0].strip() != CURVE_MAGIC:
        raise InputError(f"first line is not {CURVE_MAGIC!r}", source=source, line=1)
    head: dict[str, str] = {}
    i = 1
    while i < len(lines) and lines[i].startswith("#"):
        key, _, value = lines[i][1:].partition(":")
        head[key.strip()] = value.strip()
        i += 1
    if i >= len(lines):
        raise InputError("no column-name line", source=source)
    cols = lines[i].split(",")
    try:
        data = np.loadtxt(io.StringIO("\n".join(lines[i + 1:])), delimiter=",", ndmin=2)
    except ValueError as e:
        raise InputError(f"bad data row ({e})", source=source) from None
    if data.shape[1] != len(cols):
        raise InputError(f"{data.shape[1]} cells per row, expected {len(cols)}", source=source)
    prov = Provenance.from_dict(json.loads(head["provenance"])) if "provenance" in head else None
    if cols[0] == "freq_hz":
        return Curve(head.get("name", ""), "freq_hz", data[:, 0], data[:, 1] + 1j * data[:, 2],
                     head.get("unit", "1"), prov or Provenance(step="read_curve", sources=(source,)))
    return Curve(head.get("name", ""), "time_s", data[:, 0], data[:, 1], head.get("unit", "1"),
                 prov or Provenance(step="read_curve", sources=(source,)))
