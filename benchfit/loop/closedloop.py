"""Closed-loop predictions in the frequency domain: reference tracking and output impedance.

What is computed
----------------
With T the return ratio (plant · sensing · compensator) and β the sensing
gain (the divider ratio V_feedback / V_out), the reference enters where the
fed-back signal is subtracted, so

* reference tracking   V_out / V_ref = (1/β) · T / (1 + T)
* sensitivity          S = 1 / (1 + T)
* output impedance     Z_cl = Z_ol / (1 + T)   (Z_ol: open-loop output impedance,
  i.e. with the compensator output held still)

The loop and the impedance may each be a :class:`~benchfit.fitting.model.PlantModel`
(its delay applied exactly), a callable ``freq_hz -> complex`` or a measured
:class:`~benchfit.data.FrequencyResponse`.  When two sweeps sit on different
grids, the loop is interpolated onto the impedance's grid linearly in
log-frequency on dB and unwrapped phase.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from scipy import optimize

from benchfit.data.response import FrequencyResponse
from benchfit.errors import InputError
from benchfit.fileio import as_float, decode_complex, encode_complex
from benchfit.fitting.model import PlantModel
from benchfit.loop.margins import model_band
from benchfit.provenance import Provenance

Loop = PlantModel | FrequencyResponse | Callable[[np.ndarray], np.ndarray]


# ----------------------------------------------------------------------------- inputs
def default_grid(*things: Any, points_per_decade: int = 100) -> np.ndarray:
    """A log frequency grid (Hz) covering every model's band (and sweeps' ranges)."""
    lo, hi = [], []
    for t in things:
        if isinstance(t, PlantModel):
            a, b = model_band(t)
            lo.append(a)
            hi.append(b)
        elif isinstance(t, FrequencyResponse):
            lo.append(t.f_min_hz)
            hi.append(t.f_max_hz)
    if not lo:
        raise InputError("give freq_hz: no model or sweep to take a frequency band from")
    a, b = min(lo), max(hi)
    n = max(int(math.log10(b / a) * points_per_decade), 16) + 1
    return np.logspace(math.log10(a), math.log10(b), n)


def values_at(thing: Loop, freq_hz: np.ndarray, what: str = "loop") -> np.ndarray:
    """Complex values of a model, callable or sweep at ``freq_hz``.

    A sweep is interpolated linearly in log f on dB and unwrapped phase; asking
    for frequencies outside it raises :class:`InputError`.
    """
    f = np.asarray(freq_hz, dtype=float)
    if isinstance(thing, FrequencyResponse):
        if f.min() < thing.f_min_hz * (1 - 1e-9) or f.max() > thing.f_max_hz * (1 + 1e-9):
            raise InputError(f"the {what} sweep covers {thing.f_min_hz:.4g}..{thing.f_max_hz:.4g} Hz; "
                             f"asked for {f.min():.4g}..{f.max():.4g} Hz")
        if f.shape == thing.freq_hz.shape and np.allclose(f, thing.freq_hz, rtol=1e-12):
            return np.asarray(thing.response, dtype=complex)
        x = np.log10(thing.freq_hz)
        db = np.interp(np.log10(f), x, thing.mag_db)
        ph = np.interp(np.log10(f), x, np.unwrap(np.angle(thing.response)))
        return 10 ** (db / 20) * np.exp(1j * ph)
    if isinstance(thing, PlantModel):
        return thing.response(f)
    if callable(thing):
        with np.errstate(all="ignore"):
            v = np.asarray(thing(f), dtype=complex).reshape(f.shape)
        if not np.all(np.isfinite(v)):
            raise InputError(f"the {what} is not finite at some frequency")
        return v
    raise InputError(f"the {what} must be a model, a sweep or a function of frequency; "
                     f"found {type(thing).__name__}")


def _provenance(*things: Any) -> tuple[dict[str, Any], ...]:
    return tuple(t.provenance.to_dict() for t in things if hasattr(t, "provenance"))


def _check_beta(sensing_gain: float) -> float:
    b = float(sensing_gain)
    if not math.isfinite(b) or b <= 0:
        raise InputError(f"sensing gain must be a positive number, found {sensing_gain}",
                         source="sensing_gain")
    return b


# ----------------------------------------------------------------------------- closed loop
@dataclass(frozen=True, eq=False)
class ClosedLoop:
    """Reference-to-output response of a closed loop.

    Attributes
    ----------
    freq_hz
        Frequencies, Hz.
    response
        V_out / V_ref = (1/β)·T/(1+T), complex.
    sensitivity
        S = 1/(1+T), complex.
    sensing_gain
        β used.
    low_freq_gain
        |V_out/V_ref| at DC for a model (1/β with an integrator), at the
        lowest frequency for a sweep.
    bandwidth_hz
        Where |V_out/V_ref| first falls 3 dB below ``low_freq_gain`` (nan if
        it does not within the band).
    peaking_db
        Highest |V_out/V_ref| relative to ``low_freq_gain``, dB (0 if none).
    peak_freq_hz
        Where that peak lies.
    warnings, provenance
    """

    freq_hz: np.ndarray
    response: np.ndarray
    sensitivity: np.ndarray
    sensing_gain: float
    low_freq_gain: float
    bandwidth_hz: float
    peaking_db: float
    peak_freq_hz: float
    warnings: tuple[str, ...] = ()
    provenance: Provenance = field(default_factory=lambda: Provenance(step="closed_loop"))

    def to_response(self) -> FrequencyResponse:
        """The closed-loop response as a FrequencyResponse (quantity 'closed')."""
        return FrequencyResponse(self.freq_hz, self.response, quantity="closed",
                                 provenance=self.provenance)

    def to_dict(self) -> dict[str, Any]:
        return {
            "kind": "closed_loop",
            "freq_hz": np.asarray(self.freq_hz).tolist(),
            "response": encode_complex(self.response),
            "sensitivity": encode_complex(self.sensitivity),
            "sensing_gain": self.sensing_gain,
            "low_freq_gain": self.low_freq_gain,
            "bandwidth_hz": self.bandwidth_hz,
            "peaking_db": self.peaking_db,
            "peak_freq_hz": self.peak_freq_hz,
            "warnings": list(self.warnings),
            "provenance": self.provenance.to_dict(),
        }

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> ClosedLoop:
        if not isinstance(d, dict) or d.get("kind") != "closed_loop":
            raise InputError("expected a closed-loop object (kind 'closed_loop')")
        return cls(
            freq_hz=np.asarray(d["freq_hz"], dtype=float),
            response=decode_complex(d["response"], what="response"),
            sensitivity=decode_complex(d["sensitivity"], what="sensitivity"),
            sensing_gain=as_float(d["sensing_gain"]), low_freq_gain=as_float(d["low_freq_gain"]),
            bandwidth_hz=as_float(d["bandwidth_hz"]), peaking_db=as_float(d["peaking_db"]),
            peak_freq_hz=as_float(d["peak_freq_hz"]),
            warnings=tuple(d.get("warnings", ())), provenance=Provenance.from_dict(d.get("provenance")),
        )


def closed_loop(loop: Loop, freq_hz: np.ndarray | None = None, *,
                sensing_gain: float = 1.0) -> ClosedLoop:
    """Reference tracking V_out/V_ref = (1/β)·T/(1+T) and its bandwidth.

    Parameters
    ----------
    loop
        Loop gain T: PlantModel, callable (Hz -> complex) or FrequencyResponse.
    freq_hz
        Frequencies (Hz); defaults to the sweep's own, or a dense grid over
        the model's band.
    sensing_gain
        β, V_feedback / V_out (e.g. R_bottom / (R_top + R_bottom)).

    Returns
    -------
    ClosedLoop
    """
    beta = _check_beta(sensing_gain)
    if freq_hz is None:
        f = loop.freq_hz if isinstance(loop, FrequencyResponse) else default_grid(loop)
    else:
        f = np.asarray(freq_hz, dtype=float)
    T = values_at(loop, f)
    with np.errstate(divide="ignore", invalid="ignore"):
        S = 1.0 / (1.0 + T)
    if not np.all(np.isfinite(S)):
        raise InputError("1 + T is zero at a frequency in the band (a closed-loop pole on the jω axis)")
    G = T * S / beta
    mag = np.abs(G)
    ref = float(mag[0])
    if isinstance(loop, PlantModel):       # a model gives the exact DC value
        t0 = loop.dc_gain()
        ref = 1.0 / beta if math.isinf(t0) else abs(t0 / (1.0 + t0)) / beta
    warnings = []
    if abs(T[0]) < 10:
        warnings.append(f"the loop gain is only {20 * math.log10(abs(T[0])):.1f} dB at the lowest "
                        f"frequency ({f[0]:.4g} Hz): the output does not track 1/β there")
    bw = _first_below(f, mag, ref / math.sqrt(2.0),
                      loop if not isinstance(loop, FrequencyResponse) else None, beta)
    j = int(np.argmax(mag))
    peaking = max(0.0, 20 * math.log10(mag[j] / ref))
    if math.isnan(bw):
        warnings.append("the closed-loop gain does not fall 3 dB within the band")
    prov = Provenance(step="closed_loop", settings={"sensing_gain": beta},
                      parents=_provenance(loop))
    return ClosedLoop(freq_hz=f, response=G, sensitivity=S, sensing_gain=beta,
                      low_freq_gain=ref, bandwidth_hz=bw, peaking_db=peaking,
                      peak_freq_hz=float(f[j]) if peaking > 0 else math.nan,
                      warnings=tuple(warnings), provenance=prov)


def _first_below(f, mag, level, exact, beta) -> float:
    """First frequency where ``mag`` falls below ``level`` (polished on a model)."""
    below = np.flatnonzero(mag < level)
    if below.size == 0 or below[0] == 0:
        return math.nan
    i = int(below[0]) - 1
    x0, x1 = math.log10(f[i]), math.log10(f[i + 1])
    if exact is None:
        g0, g1 = 20 * math.log10(mag[i] / level), 20 * math.log10(mag[i + 1] / level)
        return 10 ** (x0 + g0 / (g0 - g1) * (x1 - x0))

    def h(x):
        t = values_at(exact, np.array([10 ** x]))[0]
        return abs(t / (1 + t)) / beta - level

    return 10 ** optimize.brentq(h, x0, x1, xtol=1e-12)


# ----------------------------------------------------------------------------- output impedance
@dataclass(frozen=True, eq=False)
class OutputImpedance:
    """Open- and closed-loop output impedance.

    Attributes
    ----------
    freq_hz
        Frequencies, Hz.
    open_loop, closed_loop
        Z_ol and Z_cl = Z_ol/(1+T), complex, ohm.
    peak_ohm, peak_freq_hz
        Highest |Z_cl| in the band and where it is.
    warnings, provenance
    """

    freq_hz: np.ndarray
    open_loop: np.ndarray
    closed_loop: np.ndarray
    peak_ohm: float
    peak_freq_hz: float
    warnings: tuple[str, ...] = ()
    provenance: Provenance = field(default_factory=lambda: Provenance(step="output_impedance"))

    def to_response(self) -> FrequencyResponse:
        """Z_cl as a FrequencyResponse (quantity 'impedance')."""
        return FrequencyResponse(self.freq_hz, self.closed_loop, quantity="impedance",
                                 provenance=self.provenance)

    def to_dict(self) -> dict[str, Any]:
        return {
            "kind": "output_impedance",
            "freq_hz": np.asarray(self.freq_hz).tolist(),
            "open_loop": encode_complex(self.open_loop),
            "closed_loop": encode_complex(self.closed_loop),
            "peak_ohm": self.peak_ohm,
            "peak_freq_hz": self.peak_freq_hz,
            "warnings": list(self.warnings),
            "provenance": self.provenance.to_dict(),
        }

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> OutputImpedance:
        if not isinstance(d, dict) or d.get("kind") != "output_impedance":
            raise InputError("expected an output-impedance object (kind 'output_impedance')")
        return cls(
            freq_hz=np.asarray(d["freq_hz"], dtype=float),
            open_loop=decode_complex(d["open_loop"], what="open_loop"),
            closed_loop=decode_complex(d["closed_loop"], what="closed_loop"),
            peak_ohm=as_float(d["peak_ohm"]), peak_freq_hz=as_float(d["peak_freq_hz"]),
            warnings=tuple(d.get("warnings", ())), provenance=Provenance.from_dict(d.get("provenance")),
        )


def output_impedance(z_open: Loop, loop: Loop, freq_hz: np.ndarray | None = None) -> OutputImpedance:
    """Closed-loop output impedance Z_cl = Z_ol / (1 + T).

    Parameters
    ----------
    z_open
        Open-loop output impedance (ohm): model, callable or sweep.
    loop
        Loop gain T: model, callable or sweep.
    freq_hz
        Frequencies (Hz); defaults to the impedance sweep's own grid, else
        the loop sweep's, else a dense grid over the models' bands.

    Returns
    -------
    OutputImpedance
    """
    if freq_hz is not None:
        f = np.asarray(freq_hz, dtype=float)
    elif isinstance(z_open, FrequencyResponse):
        f = z_open.freq_hz
        if isinstance(loop, FrequencyResponse):   # only where both sweeps have data
            f = f[(f >= loop.f_min_hz) & (f <= loop.f_max_hz)]
            if f.size < 2:
                raise InputError("the impedance sweep and the loop sweep do not overlap in frequency")
    elif isinstance(loop, FrequencyResponse):
        f = loop.freq_hz
    else:
        f = default_grid(z_open, loop)
    z = values_at(z_open, f, "impedance")
    T = values_at(loop, f, "loop")
    with np.errstate(divide="ignore", invalid="ignore"):
        zc = z / (1.0 + T)
    if not np.all(np.isfinite(zc)):
        raise InputError("1 + T is zero at a frequency in the band (a closed-loop pole on the jω axis)")
    j = int(np.argmax(np.abs(zc)))
    warnings = []
    if j == len(f) - 1:
        warnings.append("|Z_cl| is largest at the top of the band; the peak may lie above it")
    prov = Provenance(step="output_impedance", parents=_provenance(z_open, loop))
    return OutputImpedance(freq_hz=f, open_loop=z, closed_loop=zc, peak_ohm=float(abs(zc[j])),
                           peak_freq_hz=float(f[j]), warnings=tuple(warnings), provenance=prov)
