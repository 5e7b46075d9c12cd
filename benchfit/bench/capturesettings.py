"""What a capture asks for and what it did: :class:`CaptureSettings` and :class:`CaptureResult`.

Plain data with JSON forms; the capture loop itself is :mod:`benchfit.bench.capture`.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, field
from typing import Any

import numpy as np

from benchfit.data.response import QUANTITIES
from benchfit.errors import InputError
from benchfit.provenance import Provenance

MAX_POINTS = 100001


@dataclass(frozen=True)
class CaptureSettings:
    """What to measure.

    Parameters
    ----------
    start_hz, stop_hz
        Sweep limits in Hz.
    points
        Points in the whole grid.
    spacing
        ``"log"`` or ``"lin"``.
    level_v
        Source level in V (None: leave the instrument's setting).
    bandwidth_hz
        Measurement bandwidth in Hz (None: leave it).
    mode
        ``"sweep"`` (instrument sweeps each segment) or ``"step"`` (point by point).
    segment_points
        Points per native sweep in sweep mode; 0 sweeps the whole grid at once.
    quantity
        What is measured (written to the file header).
    """

    start_hz: float
    stop_hz: float
    points: int
    spacing: str = "log"
    level_v: float | None = None
    bandwidth_hz: float | None = None
    mode: str = "sweep"
    segment_points: int = 0
    quantity: str = "unknown"

    def validate(self) -> None:
        """Raise :class:`InputError` naming the option that is out of range."""
        if not (np.isfinite(self.start_hz) and self.start_hz > 0):
            raise InputError(f"{self.start_hz} Hz: expected a positive frequency", source="--start")
        if not (np.isfinite(self.stop_hz) and self.stop_hz > self.start_hz):
            raise InputError(f"{self.stop_hz} Hz: expected a frequency above --start "
                             f"({self.start_hz} Hz)", source="--stop")
        if not 2 <= int(self.points) <= MAX_POINTS:
            raise InputError(f"{self.points}: expected 2..{MAX_POINTS}", source="--points")
        if self.spacing not in ("log", "lin"):
            raise InputError(f"{self.spacing!r}: expected log or lin", source="--spacing")
        if self.mode not in ("sweep", "step"):
            raise InputError(f"{self.mode!r}: expected sweep or step", source="--mode")
        if self.level_v is not None and not self.level_v > 0:
            raise InputError(f"{self.level_v} V: expected a positive level", source="--level")
        if self.bandwidth_hz is not None and not self.bandwidth_hz > 0:
            raise InputError(f"{self.bandwidth_hz} Hz: expected a positive bandwidth", source="--bandwidth")
        if self.segment_points < 0 or self.segment_points == 1:
            raise InputError(f"{self.segment_points}: expected 0 (whole sweep) or at least 2",
                             source="--segment-points")
        if self.quantity not in QUANTITIES:
            raise InputError(f"{self.quantity!r}: expected one of {QUANTITIES}", source="--quantity")

    def grid(self) -> np.ndarray:
        """The requested frequencies in Hz."""
        i = np.arange(self.points) / (self.points - 1)
        if self.spacing == "log":
            return self.start_hz * (self.stop_hz / self.start_hz) ** i
        return self.start_hz + (self.stop_hz - self.start_hz) * i

    def segments(self) -> list[tuple[int, int]]:
        """Index ranges ``[i0, i1)`` of the grid, one per native sweep or point."""
        n = int(self.points)
        if self.mode == "step":
            return [(i, i + 1) for i in range(n)]
        seg = self.segment_points if 0 < self.segment_points < n else n
        out = [(i, min(i + seg, n)) for i in range(0, n, seg)]
        if len(out) > 1 and out[-1][1] - out[-1][0] < 2:  # a sweep needs two points
            out[-2:] = [(out[-2][0], n)]
        return out

    def to_dict(self) -> dict[str, Any]:
        return asdict(self)

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> CaptureSettings:
        return cls(**{k: d[k] for k in cls.__dataclass_fields__ if k in d})


@dataclass(frozen=True)
class CaptureResult:
    """What a capture run did.

    ``points_saved`` counts rows acknowledged in the manifest (on disk and fsync'd).
    ``status`` is ``"complete"`` or ``"interrupted"`` (Ctrl-C).
    """

    path: str
    manifest_path: str
    status: str
    points_saved: int
    points_total: int
    instrument: str
    profile: str
    resource: str
    started: str
    finished: str
    settings: dict[str, Any]
    session: dict[str, int] = field(default_factory=dict)
    warnings: tuple[str, ...] = ()
    provenance: Provenance = field(default_factory=lambda: Provenance(step="capture"))

    @property
    def complete(self) -> bool:
        return self.status == "complete"

    def to_dict(self) -> dict[str, Any]:
        d = {k: getattr(self, k) for k in self.__dataclass_fields__}
        d["warnings"] = list(self.warnings)
        d["provenance"] = self.provenance.to_dict()
        d["kind"] = "capture_result"
        return d

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> CaptureResult:
        kw = {k: d[k] for k in cls.__dataclass_fields__ if k in d}
        kw["warnings"] = tuple(kw.get("warnings", ()))
        kw["provenance"] = Provenance.from_dict(d.get("provenance"))
        return cls(**kw)

    def summary(self) -> str:
        if self.complete:
            return f"captured {self.points_saved} points into {self.path}"
        return (f"stopped: {self.points_saved} of {self.points_total} points saved in {self.path}; "
                "run the same command with --resume to continue")


