"""PlantModel: a rational transfer function with an optional pure delay.

    H(s) = k · Π(s − z_i) / Π(s − p_j) · exp(−s·τ)

zeros/poles/k follow scipy's zpk convention with s in rad/s.  This is the
one model form the fitting layer produces and the loop layer consumes.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from scipy import signal

from benchfit.errors import InputError
from benchfit.fileio import (
    as_float,
    decode_complex,
    encode_complex,
    malformed_as_input_error,
    read_json,
    write_json_atomic,
)
from benchfit.provenance import Provenance


def _conj_sorted(v: np.ndarray) -> np.ndarray:
    v = np.asarray(v, dtype=complex).reshape(-1)
    return v[np.lexsort((v.imag, np.abs(v)))]


@dataclass(frozen=True, eq=False)
class PlantModel:
    """A pole/zero/gain model with delay, evaluable at any frequency.

    Parameters
    ----------
    zeros, poles
        Complex zeros and poles in rad/s (conjugate pairs for a real system).
    k
        Gain in scipy's zpk sense (the leading coefficient ratio).
    delay_s
        Pure transport delay τ in s (0 for none).
    provenance
        What produced the model.
    """

    zeros: np.ndarray
    poles: np.ndarray
    k: float
    delay_s: float = 0.0
    provenance: Provenance = field(default_factory=lambda: Provenance(step="created"))

    def __post_init__(self) -> None:
        z = _conj_sorted(self.zeros)
        p = _conj_sorted(self.poles)
        if not (np.all(np.isfinite(z)) and np.all(np.isfinite(p))):
            raise InputError("poles and zeros must be finite")
        k = float(np.real(self.k))
        if not np.isfinite(k):
            raise InputError(f"gain k must be finite, found {self.k}")
        d = float(self.delay_s)
        if not np.isfinite(d) or d < 0:
            raise InputError(f"delay must be a finite value >= 0 s, found {self.delay_s}")
        z.setflags(write=False)
        p.setflags(write=False)
        object.__setattr__(self, "zeros", z)
        object.__setattr__(self, "poles", p)
        object.__setattr__(self, "k", k)
        object.__setattr__(self, "delay_s", d)

    # ----- evaluation ------------------------------------------------------------
    def at_s(self, s: np.ndarray) -> np.ndarray:
        """Evaluate H at complex frequencies ``s`` (rad/s), vectorised."""
        s = np.asarray(s, dtype=complex)
        num = np.ones_like(s)
        for z in self.zeros:
            num = num * (s - z)
        den = np.ones_like(s)
        for p in self.poles:
            den = den * (s - p)
        h = self.k * num / den
        if self.delay_s:
            h = h * np.exp(-s * self.delay_s)
        return h

    def response(self, freq_hz: np.ndarray) -> np.ndarray:
        """Complex response at ``freq_hz`` (Hz)."""
        return self.at_s(2j * np.pi * np.asarray(freq_hz, dtype=float))

    __call__ = response

    @property
    def order(self) -> int:
        """Number of poles."""
        return int(self.poles.shape[0])

    @property
    def is_stable(self) -> bool:
        """True when every pole lies in the closed left half-plane (integrators allowed)."""
        return bool(np.all(self.poles.real <= 0))

    def dc_gain(self) -> float:
        """H(0) (inf for a model with integrators)."""
        if np.any(np.abs(self.poles) == 0):
            return float("inf")
        return float(np.real(self.at_s(np.array([0j]))[0]))

    def to_ss(self) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """State-space (A, B, C, D) of the rational part (delay not included)."""
        return signal.zpk2ss(self.zeros, self.poles, self.k)

    def to_tf(self) -> tuple[np.ndarray, np.ndarray]:
        """Numerator and denominator polynomials of the rational part (s in rad/s)."""
        b, a = signal.zpk2tf(self.zeros, self.poles, self.k)
        return np.real(b), np.real(a)

    def cascade(self, other: PlantModel, step: str = "cascade") -> PlantModel:
        """Series connection self · other."""
        return PlantModel(
            zeros=np.concatenate([self.zeros, other.zeros]),
            poles=np.concatenate([self.poles, other.poles]),
            k=self.k * other.k,
            delay_s=self.delay_s + other.delay_s,
            provenance=Provenance(step=step, parents=(self.provenance.to_dict(), other.provenance.to_dict())),
        )

    # ----- JSON ----------------------------------------------------------------
    def to_dict(self) -> dict[str, Any]:
        return {
            "kind": "plant_model",
            "zeros": encode_complex(self.zeros),
            "poles": encode_complex(self.poles),
            "k": self.k,
            "delay_s": self.delay_s,
            "provenance": self.provenance.to_dict(),
        }

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> PlantModel:
        if not isinstance(d, dict):
            raise InputError("expected a model object")
        if "model" in d and isinstance(d["model"], dict):  # a whole fit result
            d = d["model"]
        for key in ("zeros", "poles", "k"):
            if key not in d:
                raise InputError(f"model has no {key!r}; expected zeros, poles, k (and delay_s)")
        return cls(
            zeros=decode_complex(d["zeros"], what="zeros"),
            poles=decode_complex(d["poles"], what="poles"),
            k=as_float(d["k"]),
            delay_s=as_float(d.get("delay_s", 0.0)),
            provenance=Provenance.from_dict(d.get("provenance")),
        )

    def to_json(self, path: str | os.PathLike) -> None:
        write_json_atomic(path, self.to_dict())

    @classmethod
    def from_json(cls, path: str | os.PathLike) -> PlantModel:
        with malformed_as_input_error(path, "model file"):
            return cls.from_dict(read_json(path))

    def __repr__(self) -> str:
        return (f"PlantModel(order={self.order}, zeros={len(self.zeros)}, k={self.k:.6g}, "
                f"delay_s={self.delay_s:.3g})")
