"""FitResult: the fitted model, its physical parameters with σ, and fit statistics."""

from __future__ import annotations

import math
import os
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from benchfit import numfmt
from benchfit.errors import InputError
from benchfit.fileio import as_float, malformed_as_input_error, read_json, write_json_atomic
from benchfit.fitting.model import PlantModel
from benchfit.fitting.parameters import Structure, parameter_label, response
from benchfit.provenance import Provenance

#: Statistics keys every FitResult carries.
STAT_KEYS = ("rms_db", "rms_deg", "max_db", "max_deg", "reduced_chi2", "points", "f_min_hz",
             "f_max_hz", "order", "iterations", "converged", "noise_floor_db")



def in_right_half_plane(name: str, value: float) -> bool:
    """True when parameter ``name`` at ``value`` puts its root in the right half-plane.

    The sign convention of docs/fitting.md: a real pole or zero at a negative
    frequency, a pair (of poles or zeros) with a negative Q.  Natural
    frequencies, the gain and the delay carry no half-plane.
    """
    if not (value < 0):
        return False
    real = name.startswith(("pole", "zero")) and name.endswith("_hz") and "pair" not in name
    return real or name.endswith("_q")

@dataclass(frozen=True)
class Parameter:
    """One physical parameter of the fitted model.

    Parameters
    ----------
    name
        Stable name (see :mod:`benchfit.fitting.parameters`).
    value
        Best-fit value, in ``unit``.
    stderr
        One-sigma standard error (NaN when fixed or not estimable).
    unit
        SI unit ("Hz", "s", "" for dimensionless).
    fixed
        True when held at a user-given value.
    at_bound
        True when the fit ended on one of the user's bounds: the covariance is
        not valid there, so ``stderr`` is NaN (JSON null).
    """

    name: str
    value: float
    stderr: float = float("nan")
    unit: str = ""
    fixed: bool = False
    at_bound: bool = False

    def to_dict(self) -> dict[str, Any]:
        return {"name": self.name, "value": self.value, "stderr": self.stderr,
                "unit": self.unit, "fixed": self.fixed, "at_bound": self.at_bound}

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> Parameter:
        return cls(name=str(d["name"]), value=as_float(d["value"]),
                   stderr=as_float(d.get("stderr")), unit=str(d.get("unit", "")),
                   fixed=bool(d.get("fixed", False)), at_bound=bool(d.get("at_bound", False)))


def _matrix(a: Any, n: int) -> np.ndarray:
    if a is None:
        return np.zeros((n, n))
    m = np.array([[as_float(x) for x in row] for row in a], dtype=float).reshape(n, n)
    m.setflags(write=False)
    return m


@dataclass(frozen=True, eq=False)
class FitResult:
    """Result of :func:`benchfit.fitting.fit`.

    Attributes
    ----------
    model
        The fitted :class:`PlantModel` (zeros, poles, k, delay_s; rad/s).
    parameters
        Physical parameters with standard errors.
    stats
        Fit statistics: see :data:`STAT_KEYS` (plus a few extra keys).
    warnings
        Things the user should act on or check (not converged, pole outside
        the band, residual far above the noise floor...).
    notes
        What the fit simplified on the way, for the record (zeros above the
        band dropped, cancelling pairs removed, zeros replaced by a delay...).
    order_scan
        One dict per order tried by the automatic order choice
        (order, rms_db, rms_deg, chi: rms normalised residual).
    varied
        Names of the varied parameters, the row/column order of
        ``covariance`` and ``correlation``.
    covariance, correlation
        Of the varied physical parameters (units as in ``parameters``).
    integrators
        Number of poles fixed at the origin.
    provenance
        Source file and every setting used.
    """

    model: PlantModel
    parameters: tuple[Parameter, ...]
    stats: dict[str, Any]
    warnings: tuple[str, ...] = ()
    notes: tuple[str, ...] = ()
    order_scan: tuple[dict[str, Any], ...] = ()
    varied: tuple[str, ...] = ()
    covariance: np.ndarray = field(default_factory=lambda: np.zeros((0, 0)))
    correlation: np.ndarray = field(default_factory=lambda: np.zeros((0, 0)))
    integrators: int = 0
    provenance: Provenance = field(default_factory=lambda: Provenance(step="fit"))

    # ----- parameters ---------------------------------------------------------------
    @property
    def structure(self) -> Structure:
        return Structure.from_names(tuple(p.name for p in self.parameters), self.integrators)

    @property
    def values(self) -> np.ndarray:
        """Parameter values in :attr:`parameters` order."""
        return np.array([p.value for p in self.parameters], dtype=float)

    def parameter(self, name: str) -> Parameter:
        """The parameter called ``name``."""
        for p in self.parameters:
            if p.name == name:
                return p
        raise KeyError(f"no parameter {name!r}; have {', '.join(p.name for p in self.parameters)}")

    @property
    def undetermined(self) -> tuple[str, ...]:
        """Varied parameters the data cannot determine (their σ is NaN, JSON null);
        those on a bound are listed in :attr:`at_bound` instead."""
        return tuple(p.name for p in self.parameters
                     if not p.fixed and not p.at_bound and p.name in self.varied
                     and not np.isfinite(p.stderr))

    @property
    def at_bound(self) -> tuple[str, ...]:
        """Parameters that ended on one of the user's bounds (σ not determined)."""
        return tuple(p.name for p in self.parameters if p.at_bound)

    def response(self, freq_hz: np.ndarray) -> np.ndarray:
        """Model response at ``freq_hz`` (Hz)."""
        return self.model.response(freq_hz)

    def draw_responses(self, freq_hz: np.ndarray, n: int,
                       rng: np.random.Generator | None = None) -> np.ndarray:
        """Responses with the physical parameters drawn from the fit's covariance.

        Parameters
        ----------
        freq_hz
            Frequencies (Hz).
        n
            Number of draws.
        rng
            Random generator (``np.random.default_rng()`` when None).

        Returns
        -------
        ndarray
            Shape (n, len(freq_hz)), complex.
        """
        rng = np.random.default_rng() if rng is None else rng
        f = np.asarray(freq_hz, dtype=float).reshape(-1)
        st = self.structure
        base = self.values
        draws = np.tile(base, (int(n), 1))
        names = [p.name for p in self.parameters]
        idx = [names.index(v) for v in self.varied]
        cov = np.asarray(self.covariance, dtype=float)
        # Parameters the data do not determine (NaN rows) stay at their values; the
        # others' covariance is the one with those held (see fitting.uncertainty).
        known = [k for k in range(len(idx)) if np.isfinite(cov[k, k])] if idx else []
        if known:
            sub = cov[np.ix_(known, known)]
            # eigh-based square root tolerates a (numerically) singular covariance.
            evals, evecs = np.linalg.eigh(0.5 * (sub + sub.T))
            root = evecs * np.sqrt(np.clip(evals, 0.0, None))
            z = rng.standard_normal((int(n), len(known)))
            draws[:, [idx[k] for k in known]] += z @ root.T
        return response(st, draws, 2j * np.pi * f)

    # ----- report -------------------------------------------------------------------
    def report(self, warnings: bool = True) -> str:
        """Compact text report: parameters ± σ, strong correlations, statistics.

        ``warnings=False`` leaves the warnings out (the CLI prints them to stderr).
        """
        st = self.stats
        src = ", ".join(self.provenance.sources) or "in-memory data"
        # stats["order"] counts every pole, the integrators too (JSON fit.order); the headline
        # says the poles --order asks for and the integrators apart, as the order scan does
        order = st.get("order")
        if order is not None and self.integrators:
            order = int(order) - int(self.integrators)
        lines = [f"fit of {src}: order {order}"
                 + (f" (+{self.integrators} integrator{'s' * (self.integrators > 1)})"
                    if self.integrators else "")
                 + f", {st.get('points')} points, {numfmt.eng(st.get('f_min_hz', 0), 'Hz')} to "
                 f"{numfmt.eng(st.get('f_max_hz', 0), 'Hz')}",
                 "",
                 f"  {'parameter':<32} {'value':>12} {'± 1σ':>14} {'relative':>9}  key (--fix, JSON)"]
        for p in self.parameters:
            unit = p.unit or ""
            if p.fixed:
                err, rel = "fixed", ""
            elif p.at_bound:
                err, rel = "not determined", "at bound"
            elif np.isfinite(p.stderr):
                err = numfmt.quantity(p.stderr, unit, 2)
                rel = f"{numfmt.sig(abs(p.stderr / p.value) * 100, 2)} %" if p.value else ""
            elif p.name in self.varied:
                err, rel = "not determined", ""
            else:
                err, rel = "not estimated", ""
            label = parameter_label(p.name) + (" (RHP)" if in_right_half_plane(p.name, p.value) else "")
            lines.append(f"  {label:<32} {numfmt.quantity(p.value, unit, numfmt.FIT_DIGITS):>12} "
                         f"{err:>14} {rel:>9}  {p.name}")
        if any(in_right_half_plane(p.name, p.value) for p in self.parameters):
            lines.append("  (RHP) right half-plane: a negative frequency or Q (docs/fitting.md); "
                         "an RHP zero adds phase lag, an RHP pole is unstable")
        strong = []
        c = np.asarray(self.correlation)
        for i in range(len(self.varied)):
            for j in range(i + 1, len(self.varied)):
                if np.isfinite(c[i, j]) and abs(c[i, j]) > 0.7:
                    strong.append(f"{self.varied[i]}~{self.varied[j]} {c[i, j]:+.2f}")
        if strong:
            lines += ["", "  correlations above 0.7: " + ", ".join(strong)]
        lines += [
            "",
            f"  residual  rms {st.get('rms_db', float('nan')):.3g} dB / {st.get('rms_deg', float('nan')):.3g} deg,"
            f"  max {st.get('max_db', float('nan')):.3g} dB / {st.get('max_deg', float('nan')):.3g} deg",
            f"  noise floor {st.get('noise_floor_db', float('nan')):.3g} dB / "
            f"{st.get('noise_floor_deg', float('nan')):.3g} deg,"
            f"  reduced chi2 {st.get('reduced_chi2', float('nan')):.3g},"
            f"  {'converged' if st.get('converged') else 'NOT converged'}"
            f" ({st.get('iterations')} VF iterations"
            f"{'' if st.get('vf_converged', True) else ', VF stopped at its cap'},"
            f" {st.get('evaluations', 0)} refinement evaluations)",
        ]
        if self.order_scan:
            # one entry per order and kind (without delay first, then with), the best of
            # its tries: the scans visit orders twice (a delay search that ends at zero, the
            # order above the chosen one); JSON keeps every attempt in scan order
            best: dict[tuple[bool, int], float] = {}
            for d in self.order_scan:
                key = (bool(d.get("delay_s")), int(d["order"]))
                best[key] = min(best.get(key, math.inf), float(d["rms_db"]))
            scan = ", ".join(f"{n}{'+τ' if tau else ''}:{rms:.2g}dB"
                             for (tau, n), rms in sorted(best.items()))
            lines.append(f"  order scan (order[+τ: with delay]:rms) {scan}")
        lines += [f"  note: {n}" for n in self.notes]
        if warnings:
            lines += [f"  warning: {w}" for w in self.warnings]
        return "\n".join(lines)

    # ----- JSON ---------------------------------------------------------------------
    def to_dict(self) -> dict[str, Any]:
        fit_keys = ("rms_db", "rms_deg", "max_db", "max_deg", "reduced_chi2", "order", "converged")
        return {
            "kind": "fit_result",
            "model": self.model.to_dict(),
            "parameters": [p.to_dict() for p in self.parameters],
            "fit": {k: self.stats.get(k) for k in fit_keys},
            "stats": dict(self.stats),
            "warnings": list(self.warnings),
            "notes": list(self.notes),
            "order_scan": [dict(d) for d in self.order_scan],
            "varied": list(self.varied),
            "undetermined": list(self.undetermined),
            "at_bound": list(self.at_bound),
            "covariance": np.asarray(self.covariance).tolist(),
            "correlation": np.asarray(self.correlation).tolist(),
            "integrators": self.integrators,
            "provenance": self.provenance.to_dict(),
        }

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> FitResult:
        if not isinstance(d, dict) or "model" not in d or "parameters" not in d:
            raise InputError("expected a fit result with 'model' and 'parameters'")
        varied = tuple(str(v) for v in d.get("varied", ()))
        n = len(varied)
        stats = {k: (as_float(v) if v is None or v in ("inf", "-inf") else v)
                 for k, v in dict(d.get("stats", {})).items()}
        return cls(
            model=PlantModel.from_dict(d["model"]),
            parameters=tuple(Parameter.from_dict(p) for p in d["parameters"]),
            stats=stats,
            warnings=tuple(str(w) for w in d.get("warnings", ())),
            notes=tuple(str(n) for n in d.get("notes", ())),
            order_scan=tuple(dict(x) for x in d.get("order_scan", ())),
            varied=varied,
            covariance=_matrix(d.get("covariance"), n),
            correlation=_matrix(d.get("correlation"), n),
            integrators=int(d.get("integrators", 0)),
            provenance=Provenance.from_dict(d.get("provenance")),
        )

    def to_json(self, path: str | os.PathLike) -> None:
        """Write to ``path`` as JSON (atomically)."""
        write_json_atomic(path, self.to_dict())

    @classmethod
    def from_json(cls, path: str | os.PathLike) -> FitResult:
        with malformed_as_input_error(path, "fit-result file"):
            return cls.from_dict(read_json(path))

    def __repr__(self) -> str:
        return (f"FitResult(order={self.stats.get('order')}, rms_db={self.stats.get('rms_db', 0):.3g}, "
                f"rms_deg={self.stats.get('rms_deg', 0):.3g}, converged={self.stats.get('converged')})")
