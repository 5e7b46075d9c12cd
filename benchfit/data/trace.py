"""TimeTrace: a scope record, time in s and one or more channels in V."""

from __future__ import annotations

import os
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from benchfit.data.quote import quote_list
from benchfit.errors import InputError
from benchfit.fileio import read_json, write_json_atomic
from benchfit.provenance import Provenance


@dataclass(frozen=True, eq=False)
class TimeTrace:
    """Sampled waveforms on a common time axis.

    Parameters
    ----------
    time_s
        Sample times in s, strictly increasing (may start negative: pre-trigger).
    channels
        Channel name -> samples (V, or A for a current probe), one per time.
    meta
        Free-form metadata (scope identity, probe, units seen in the file...).
    provenance
        What produced this object.
    """

    time_s: np.ndarray
    channels: dict[str, np.ndarray]
    meta: dict[str, Any] = field(default_factory=dict)
    provenance: Provenance = field(default_factory=lambda: Provenance(step="created"))

    def __post_init__(self) -> None:
        t = np.asarray(self.time_s, dtype=float).reshape(-1)
        if t.shape[0] < 2:
            raise InputError(f"a trace needs at least 2 samples, found {t.shape[0]}")
        if not np.all(np.isfinite(t)):
            i = int(np.flatnonzero(~np.isfinite(t))[0])
            raise InputError(f"time at sample {i + 1} is not finite")
        if np.any(np.diff(t) <= 0):
            i = int(np.flatnonzero(np.diff(t) <= 0)[0])
            raise InputError(f"time must be strictly increasing; sample {i + 2} does not follow sample {i + 1}")
        if not self.channels:
            raise InputError("a trace needs at least one channel")
        chans = {}
        for name, v in self.channels.items():
            a = np.asarray(v, dtype=float).reshape(-1)
            if a.shape[0] != t.shape[0]:
                raise InputError(f"channel {name!r} has {a.shape[0]} samples, expected {t.shape[0]}")
            a.setflags(write=False)
            chans[str(name)] = a
        t.setflags(write=False)
        object.__setattr__(self, "time_s", t)
        object.__setattr__(self, "channels", chans)
        object.__setattr__(self, "meta", dict(self.meta))

    def __len__(self) -> int:
        return int(self.time_s.shape[0])

    @property
    def names(self) -> list[str]:
        return list(self.channels)

    @property
    def sample_interval_s(self) -> float:
        """Median sample interval in s."""
        return float(np.median(np.diff(self.time_s)))

    def channel(self, which: str | int | None = None) -> np.ndarray:
        """Samples of one channel, by name or 0-based index (default: the first).

        Raises
        ------
        InputError
            When no such channel exists; the message lists the ones that do.
        """
        names = self.names
        if which is None:
            return self.channels[names[0]]
        if isinstance(which, int) or (isinstance(which, str) and which.isdigit()):
            i = int(which)
            if 0 <= i < len(names):
                return self.channels[names[i]]
            raise InputError(f"channel index {i} out of range; the trace has {quote_list(names)}",
                             source="--channel")
        if which in self.channels:
            return self.channels[which]
        low = {n.lower(): n for n in names}
        if which.lower() in low:
            return self.channels[low[which.lower()]]
        raise InputError(f"no channel {which!r}; the trace has {quote_list(names)}", source="--channel")

    def to_dict(self) -> dict[str, Any]:
        return {
            "kind": "time_trace",
            "time_s": self.time_s.tolist(),
            "channels": {k: v.tolist() for k, v in self.channels.items()},
            "meta": self.meta,
            "provenance": self.provenance.to_dict(),
        }

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> TimeTrace:
        if not isinstance(d, dict) or "time_s" not in d or "channels" not in d:
            raise InputError("expected a time-trace object with 'time_s' and 'channels'")
        if not isinstance(d["channels"], dict):
            raise InputError("'channels' must map names to sample lists")
        return cls(time_s=d["time_s"], channels=d["channels"], meta=d.get("meta", {}),
                   provenance=Provenance.from_dict(d.get("provenance")))

    def to_json(self, path: str | os.PathLike) -> None:
        write_json_atomic(path, self.to_dict())

    @classmethod
    def from_json(cls, path: str | os.PathLike) -> TimeTrace:
        return cls.from_dict(read_json(path))

    def __repr__(self) -> str:
        return (f"TimeTrace({len(self)} samples, {self.time_s[0]:.4g}..{self.time_s[-1]:.4g} s, "
                f"channels={self.names})")
