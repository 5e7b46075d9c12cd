"""FrequencyResponse: one measured (or predicted) complex response against frequency.

The complex response is the one internal form; dB and degrees are views.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np

from benchfit.errors import InputError
from benchfit.fileio import (
    decode_complex,
    encode_complex,
    malformed_as_input_error,
    read_json,
    write_json_atomic,
)
from benchfit.provenance import Provenance

#: What a sweep can be a measurement of.
QUANTITIES = ("plant", "loop", "closed", "impedance", "compensator", "unknown")


def _opt_array(values: Any, n: int, name: str, *, dtype=float) -> np.ndarray | None:
    if values is None:
        return None
    arr = np.asarray(values, dtype=dtype).reshape(-1)
    if arr.shape[0] != n:
        raise InputError(f"{name} has {arr.shape[0]} values, expected {n} (one per frequency)")
    arr.setflags(write=False)
    return arr


@dataclass(frozen=True, eq=False)
class FrequencyResponse:
    """A complex frequency response sampled at strictly increasing positive frequencies.

    Parameters
    ----------
    freq_hz
        Frequencies in Hz, strictly increasing, finite and positive.
    response
        Complex response, one value per frequency (dimensionless, or ohm for
        an impedance).
    stddev
        Optional standard deviation of the complex response per point (same
        unit as ``response``).  Used as weights by the fit.
    weight
        Optional relative weight per point (larger = trusted more).
    coherence
        Optional coherence per point (0..1), as some analyzers export it.
    quantity
        What was measured: one of :data:`QUANTITIES`.
    meta
        Free-form metadata (instrument identity, units seen in the file...).
    provenance
        What produced this object.
    """

    freq_hz: np.ndarray
    response: np.ndarray
    stddev: np.ndarray | None = None
    weight: np.ndarray | None = None
    coherence: np.ndarray | None = None
    quantity: str = "unknown"
    meta: dict[str, Any] = field(default_factory=dict)
    provenance: Provenance = field(default_factory=lambda: Provenance(step="created"))

    def __post_init__(self) -> None:
        f = np.asarray(self.freq_hz, dtype=float).reshape(-1)
        h = np.asarray(self.response, dtype=complex).reshape(-1)
        if f.shape[0] != h.shape[0]:
            raise InputError(
                f"{f.shape[0]} frequencies but {h.shape[0]} response values; expected equal counts"
            )
        if f.shape[0] < 2:
            raise InputError(f"a sweep needs at least 2 points, found {f.shape[0]}")
        if not np.all(np.isfinite(f)):
            i = int(np.flatnonzero(~np.isfinite(f))[0])
            raise InputError(f"frequency at point {i + 1} is not finite ({f[i]})")
        if np.any(f <= 0):
            i = int(np.flatnonzero(f <= 0)[0])
            raise InputError(f"frequency at point {i + 1} is {f[i]} Hz; expected a positive value")
        if np.any(np.diff(f) <= 0):
            i = int(np.flatnonzero(np.diff(f) <= 0)[0])
            raise InputError(
                f"frequencies must be strictly increasing; point {i + 2} ({f[i + 1]} Hz) "
                f"follows {f[i]} Hz"
            )
        if not np.all(np.isfinite(h)):
            i = int(np.flatnonzero(~np.isfinite(h))[0])
            raise InputError(f"response at point {i + 1} ({f[i]} Hz) is not finite")
        if self.quantity not in QUANTITIES:
            raise InputError(f"quantity {self.quantity!r} unknown; expected one of {QUANTITIES}")
        f.setflags(write=False)
        h.setflags(write=False)
        object.__setattr__(self, "freq_hz", f)
        object.__setattr__(self, "response", h)
        n = f.shape[0]
        object.__setattr__(self, "stddev", _opt_array(self.stddev, n, "stddev"))
        object.__setattr__(self, "weight", _opt_array(self.weight, n, "weight"))
        object.__setattr__(self, "coherence", _opt_array(self.coherence, n, "coherence"))
        object.__setattr__(self, "meta", dict(self.meta))

    # ----- views -------------------------------------------------------------------
    def __len__(self) -> int:
        return int(self.freq_hz.shape[0])

    @property
    def omega(self) -> np.ndarray:
        """Angular frequency in rad/s."""
        return 2.0 * np.pi * self.freq_hz

    @property
    def magnitude(self) -> np.ndarray:
        """Linear magnitude |H|."""
        return np.abs(self.response)

    @property
    def mag_db(self) -> np.ndarray:
        """Magnitude in dB (20·log10|H|)."""
        with np.errstate(divide="ignore"):
            return 20.0 * np.log10(np.abs(self.response))

    @property
    def phase_deg(self) -> np.ndarray:
        """Unwrapped phase in degrees (the first point lies in (-180, 180])."""
        return np.degrees(np.unwrap(np.angle(self.response)))

    @property
    def f_min_hz(self) -> float:
        return float(self.freq_hz[0])

    @property
    def f_max_hz(self) -> float:
        return float(self.freq_hz[-1])

    # ----- operations ---------------------------------------------------------------
    def band(self, f_min_hz: float | None = None, f_max_hz: float | None = None) -> FrequencyResponse:
        """The points with ``f_min_hz <= f <= f_max_hz``.

        Raises
        ------
        InputError
            When fewer than two points fall inside the band.
        """
        lo = -np.inf if f_min_hz is None else float(f_min_hz)
        hi = np.inf if f_max_hz is None else float(f_max_hz)
        if lo >= hi:
            raise InputError(f"band {lo:g}:{hi:g} Hz is empty; expected FMIN < FMAX", source="--band")
        m = (self.freq_hz >= lo) & (self.freq_hz <= hi)
        if int(m.sum()) < 2:
            raise InputError(
                f"band {lo:g}:{hi:g} Hz holds {int(m.sum())} points of the sweep "
                f"({self.f_min_hz:g}..{self.f_max_hz:g} Hz); expected at least 2",
                source="--band",
            )
        return self._take(m, step="band", settings={"f_min_hz": f_min_hz, "f_max_hz": f_max_hz})

    def _take(self, idx: np.ndarray, step: str, settings: dict[str, Any]) -> FrequencyResponse:
        def sub(a):
            return None if a is None else a[idx]

        return replace(
            self,
            freq_hz=self.freq_hz[idx],
            response=self.response[idx],
            stddev=sub(self.stddev),
            weight=sub(self.weight),
            coherence=sub(self.coherence),
            provenance=self.provenance.derive(step, settings),
        )

    def with_response(self, response: np.ndarray, *, quantity: str | None = None,
                      step: str = "transform", settings: dict[str, Any] | None = None
                      ) -> FrequencyResponse:
        """Same frequencies, new response (uncertainties dropped)."""
        return FrequencyResponse(
            freq_hz=self.freq_hz,
            response=response,
            quantity=quantity or self.quantity,
            meta=dict(self.meta),
            provenance=self.provenance.derive(step, settings or {}),
        )

    @staticmethod
    def merge(parts: list[FrequencyResponse], *, prefer: str = "later") -> FrequencyResponse:
        """Join sweeps taken over adjacent or overlapping bands into one.

        Where bands overlap, the points of one sweep are kept (``prefer='later'``
        keeps the sweep later in the list, ``'earlier'`` the first), so no
        frequency appears twice.
        """
        if not parts:
            raise InputError("merge needs at least one sweep")
        order = list(parts) if prefer == "earlier" else list(reversed(parts))
        f_all, h_all, s_all, w_all, c_all = [], [], [], [], []
        covered: list[tuple[float, float]] = []
        has = {k: all(getattr(p, k) is not None for p in parts) for k in ("stddev", "weight", "coherence")}
        for p in order:
            keep = np.ones(len(p), dtype=bool)
            for lo, hi in covered:
                keep &= ~((p.freq_hz >= lo) & (p.freq_hz <= hi))
            covered.append((p.f_min_hz, p.f_max_hz))
            f_all.append(p.freq_hz[keep])
            h_all.append(p.response[keep])
            if has["stddev"]:
                s_all.append(p.stddev[keep])
            if has["weight"]:
                w_all.append(p.weight[keep])
            if has["coherence"]:
                c_all.append(p.coherence[keep])
        f = np.concatenate(f_all)
        idx = np.argsort(f, kind="stable")

        def cat(lst):
            return np.concatenate(lst)[idx] if lst else None

        return FrequencyResponse(
            freq_hz=f[idx],
            response=np.concatenate(h_all)[idx],
            stddev=cat(s_all),
            weight=cat(w_all),
            coherence=cat(c_all),
            quantity=parts[0].quantity,
            meta=dict(parts[0].meta),
            provenance=Provenance(
                step="merge",
                sources=tuple(s for p in parts for s in p.provenance.sources),
                settings={"prefer": prefer},
                parents=tuple(p.provenance.to_dict() for p in parts),
            ),
        )

    # ----- JSON ---------------------------------------------------------------------
    def to_dict(self) -> dict[str, Any]:
        """Plain-JSON form: complex values as ``[re, im]`` pairs."""

        def opt(a):
            return None if a is None else a.tolist()

        return {
            "kind": "frequency_response",
            "freq_hz": self.freq_hz.tolist(),
            "response": encode_complex(self.response),
            "stddev": opt(self.stddev),
            "weight": opt(self.weight),
            "coherence": opt(self.coherence),
            "quantity": self.quantity,
            "meta": self.meta,
            "provenance": self.provenance.to_dict(),
        }

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> FrequencyResponse:
        if not isinstance(d, dict) or "freq_hz" not in d or "response" not in d:
            raise InputError("expected a frequency-response object with 'freq_hz' and 'response'")
        return cls(
            freq_hz=d["freq_hz"],
            response=decode_complex(d["response"], what="response"),
            stddev=d.get("stddev"),
            weight=d.get("weight"),
            coherence=d.get("coherence"),
            quantity=d.get("quantity", "unknown"),
            meta=d.get("meta", {}),
            provenance=Provenance.from_dict(d.get("provenance")),
        )

    def to_json(self, path: str | os.PathLike) -> None:
        """Write to ``path`` as JSON (atomically)."""
        write_json_atomic(path, self.to_dict())

    @classmethod
    def from_json(cls, path: str | os.PathLike) -> FrequencyResponse:
        with malformed_as_input_error(path, "frequency-response file"):
            return cls.from_dict(read_json(path))

    def __repr__(self) -> str:
        src = ", ".join(self.provenance.sources) or "in memory"
        return (f"FrequencyResponse({len(self)} points, {self.f_min_hz:.4g}..{self.f_max_hz:.4g} Hz, "
                f"quantity={self.quantity!r}, source={src})")
