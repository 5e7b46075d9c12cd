"""The :class:`Margins` result: stability margins of one loop gain, its JSON and text forms.

Produced by :mod:`benchfit.loop.margins` (see its notes for the conventions).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

from benchfit import numfmt
from benchfit.errors import InputError
from benchfit.fileio import as_float
from benchfit.provenance import Provenance

# the text report lists phase crossings with a larger GM on one summary line
_QUIET_GM_DB = 60.0


@dataclass(frozen=True)
class Margins:
    """Stability margins of one loop gain.

    Attributes
    ----------
    phase_margin_deg
        Phase margin at the main crossover, degrees, in (-180, 180];
        inf when |T| never crosses 1, nan when the band does not reach it.
    crossover_hz
        Main gain crossover frequency, Hz (nan if none).
    gain_margin_db
        Smallest positive gain margin, dB (inf if none); see module notes.
    phase_crossover_hz
        Frequency of the phase crossing that gives ``gain_margin_db``, Hz.
    delay_margin_s
        Smallest extra delay that destabilises the loop, s.
    modulus_margin
        min |1 + T| over the band (dimensionless).
    modulus_freq_hz
        Where that minimum lies, Hz.
    peak_sensitivity
        Ms = 1 / modulus_margin.
    crossings
        Every crossing: dicts with ``kind`` ("gain" or "phase"), ``freq_hz``,
        ``value`` (PM in degrees for gain crossings, GM in dB for phase
        crossings), ``direction`` ("down"/"up": the way |T| or ∠T goes) and
        ``main`` (True for the main crossover).
    gain_reduction_margin_db
        Negative gain margin closest to 0 dB (-inf if none).
    min_phase_margin_deg, min_phase_margin_hz
        The phase margin of smallest magnitude over *all* gain crossings (the
        crossing that comes closest to -1), signed, and where it is; equal
        to the main one for a loop with a single crossing.
    open_loop_unstable_poles
        P, as stated by the caller (or counted from the model).
    closed_loop_stable
        True only when the Nyquist verdict is "stable".
    verdict
        "stable", "unstable" or "undecided": undecided when the integrator
        count of a sweep is not settled by its low end and the counts it
        allows give different encirclement verdicts (:mod:`benchfit.loop.verdict`).
    encirclements
        Counter-clockwise encirclements of -1 by T (N; Z = P - N).
    integrators
        Number of open-loop poles at s = 0 used for the count.
    integrators_evidence
        Where that count came from: the model, the caller, or the fit of the
        sweep's low-frequency asymptote (slope with its standard error,
        asymptotic phase, window).
    gain_margin_gaps_hz
        Intervals (lo, hi) of a sweep, Hz, between neighbouring points where a phase
        crossing may lie unseen (:func:`benchfit.loop.sweeprules.phase_gaps`).  When there
        are any, ``gain_margin_db`` is only an upper bound (a crossing in a gap may give
        a smaller one), and NaN ("not determined") when no phase crossing was found at all.
    modulus_margin_gaps_hz
        Intervals (lo, hi) of a sweep, Hz, where |1 + T| may dip below its smallest
        sampled value unseen (:func:`benchfit.loop.sweeprules.modulus_gaps`).  When there
        are any, ``modulus_margin`` is only an upper bound (``peak_sensitivity`` a lower one).
    f_min_hz, f_max_hz
        The band examined.
    warnings
        Plain-language warnings.
    provenance
        What produced this result.
    """

    phase_margin_deg: float
    crossover_hz: float
    gain_margin_db: float
    phase_crossover_hz: float
    delay_margin_s: float
    modulus_margin: float
    modulus_freq_hz: float
    peak_sensitivity: float
    crossings: tuple[dict[str, Any], ...]
    gain_reduction_margin_db: float = -math.inf
    min_phase_margin_deg: float = math.inf
    min_phase_margin_hz: float = math.nan
    open_loop_unstable_poles: int = 0
    closed_loop_stable: bool = True
    encirclements: int = 0
    integrators: int = 0
    verdict: str = ""
    integrators_evidence: str = ""
    f_min_hz: float = math.nan
    f_max_hz: float = math.nan
    gain_margin_gaps_hz: tuple[tuple[float, float], ...] = ()
    modulus_margin_gaps_hz: tuple[tuple[float, float], ...] = ()
    warnings: tuple[str, ...] = ()
    provenance: Provenance = field(default_factory=lambda: Provenance(step="margins"))

    _FLOATS = ("phase_margin_deg", "crossover_hz", "gain_margin_db", "phase_crossover_hz",
               "delay_margin_s", "modulus_margin", "modulus_freq_hz", "peak_sensitivity",
               "gain_reduction_margin_db", "min_phase_margin_deg", "min_phase_margin_hz",
               "f_min_hz", "f_max_hz")

    def to_dict(self) -> dict[str, Any]:
        d: dict[str, Any] = {"kind": "margins"}
        for k in self._FLOATS:
            d[k] = float(getattr(self, k))
        d["crossings"] = [dict(c) for c in self.crossings]
        d["open_loop_unstable_poles"] = int(self.open_loop_unstable_poles)
        d["closed_loop_stable"] = bool(self.closed_loop_stable)
        d["encirclements"] = int(self.encirclements)
        d["integrators"] = int(self.integrators)
        d["verdict"] = self.verdict or ("stable" if self.closed_loop_stable else "unstable")
        d["integrators_evidence"] = self.integrators_evidence
        d["gain_margin_known"] = self.gain_margin_known
        d["gain_margin_gaps_hz"] = [[float(lo), float(hi)] for lo, hi in self.gain_margin_gaps_hz]
        d["modulus_margin_known"] = self.modulus_margin_known
        d["modulus_margin_gaps_hz"] = [[float(lo), float(hi)] for lo, hi in self.modulus_margin_gaps_hz]
        d["warnings"] = list(self.warnings)
        d["provenance"] = self.provenance.to_dict()
        return d

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> Margins:
        if not isinstance(d, dict) or "phase_margin_deg" not in d:
            raise InputError("expected a margins object with 'phase_margin_deg'")
        kw: dict[str, Any] = {k: as_float(d.get(k)) for k in cls._FLOATS if k in d}
        crossings = []
        for c in d.get("crossings", []):
            c = dict(c)
            c["freq_hz"] = as_float(c.get("freq_hz"))
            c["value"] = as_float(c.get("value"))
            crossings.append(c)
        return cls(
            crossings=tuple(crossings),
            open_loop_unstable_poles=int(d.get("open_loop_unstable_poles", 0)),
            closed_loop_stable=bool(d.get("closed_loop_stable", True)),
            encirclements=int(d.get("encirclements", 0)),
            integrators=int(d.get("integrators", 0)),
            verdict=str(d.get("verdict") or ("stable" if d.get("closed_loop_stable", True)
                                             else "unstable")),
            integrators_evidence=str(d.get("integrators_evidence", "")),
            gain_margin_gaps_hz=tuple((as_float(g[0]), as_float(g[1]))
                                      for g in d.get("gain_margin_gaps_hz", ())),
            modulus_margin_gaps_hz=tuple((as_float(g[0]), as_float(g[1]))
                                         for g in d.get("modulus_margin_gaps_hz", ())),
            warnings=tuple(str(w) for w in d.get("warnings", ())),
            provenance=Provenance.from_dict(d.get("provenance")),
            **kw,
        )

    def to_json(self, path) -> None:
        from benchfit.fileio import write_json_atomic

        write_json_atomic(path, self.to_dict())

    @classmethod
    def from_json(cls, path) -> Margins:
        from benchfit.fileio import read_json

        return cls.from_dict(read_json(path))

    def _verdict_word(self) -> str:
        v = self.verdict or ("stable" if self.closed_loop_stable else "unstable")
        return v if v == "stable" else v.upper()

    def band_text(self) -> str:
        """'between 10 Hz and 2 MHz' (the band the margins were looked for in), or ''."""
        if math.isfinite(self.f_min_hz) and math.isfinite(self.f_max_hz):
            return f"between {numfmt.eng(self.f_min_hz, 'Hz')} and {numfmt.eng(self.f_max_hz, 'Hz')}"
        return "in the examined band"

    def phase_margin_text(self) -> str:
        """'56.8° at 19.6 kHz', or in words why there is none."""
        if math.isfinite(self.phase_margin_deg) and math.isfinite(self.crossover_hz):
            return f"{numfmt.deg(self.phase_margin_deg)} at {numfmt.eng(self.crossover_hz, 'Hz')}"
        return f"not defined: |T| does not cross 1 (0 dB) {self.band_text()}"

    @property
    def gain_margin_known(self) -> bool:
        """False when a phase crossing may lie in a gap of the sweep (``gain_margin_gaps_hz``)."""
        return not self.gain_margin_gaps_hz

    @property
    def modulus_margin_known(self) -> bool:
        """False when |1 + T| may dip lower in a gap of the sweep (``modulus_margin_gaps_hz``)."""
        return not self.modulus_margin_gaps_hz

    def _gaps_text(self, gaps: tuple[tuple[float, float], ...] | None = None) -> str:
        gaps = self.gain_margin_gaps_hz if gaps is None else gaps
        spans = ", ".join(f"{numfmt.eng(lo, 'Hz')} to {numfmt.eng(hi, 'Hz')}" for lo, hi in gaps[:3])
        more = f" and {len(gaps) - 3} more" if len(gaps) > 3 else ""
        return f"{spans}{more}"

    def gain_margin_text(self) -> str:
        """'32.8 dB at 247 kHz', or in words why there is none."""
        if math.isfinite(self.gain_margin_db) and math.isfinite(self.phase_crossover_hz):
            at = f"{numfmt.db(self.gain_margin_db)} at {numfmt.eng(self.phase_crossover_hz, 'Hz')}"
            if self.gain_margin_gaps_hz:
                return (f"{at} or less: a phase crossing may lie unseen where the sweep has too "
                        f"few points ({self._gaps_text()})")
            return at
        if self.gain_margin_gaps_hz and math.isnan(self.gain_margin_db):
            return ("not determined: no phase crossing between the points, but one may lie "
                    f"unseen where the sweep has too few points ({self._gaps_text()}); sweep "
                    "there with more points")
        top = (f"below {numfmt.eng(self.f_max_hz, 'Hz')}" if math.isfinite(self.f_max_hz)
               else "in the examined band")
        if math.isinf(self.gain_margin_db) and self.gain_margin_db > 0 and any(
                c.get("kind") == "phase" for c in self.crossings):
            # conditionally stable: phase crossings exist, but all where |T| > 1
            return (f"unbounded: every phase crossing (∠T = −180°) {top} is where |T| > 1, "
                    "so raising the gain does not make the loop unstable (see the gain reduction)")
        return f"not defined: no phase crossing (∠T = −180°) {top}"

    def gain_margin_line(self) -> str:
        """'GM 32.8 dB at 247 kHz', or 'gain margin not defined: no phase crossing …' (one line of a report)."""
        if math.isfinite(self.gain_margin_db) and math.isfinite(self.phase_crossover_hz):
            return f"GM {self.gain_margin_text()}"
        return f"gain margin {self.gain_margin_text()}"

    def report(self) -> str:
        """A short human-readable summary (numbers by :mod:`benchfit.numfmt`, gaps said in words)."""
        if math.isfinite(self.delay_margin_s):
            delay = numfmt.eng(self.delay_margin_s, "s")
        elif math.isinf(self.delay_margin_s) and self.delay_margin_s > 0:
            delay = "unlimited: no gain crossing, so no delay can make the loop unstable there"
        else:
            delay = "not defined (no gain crossing)"
        ms = self.peak_sensitivity
        lines = [
            f"phase margin    {self.phase_margin_text()}",
            f"gain margin     {self.gain_margin_text()}",
        ]
        if math.isfinite(self.gain_reduction_margin_db):
            lines.append(f"gain reduction  {numfmt.db(self.gain_reduction_margin_db)} (gain may fall this much)")
        lines += [
            f"delay margin    {delay}",
            f"modulus margin  {numfmt.sig(self.modulus_margin)} (Ms {numfmt.sig(ms)}, "
            f"{numfmt.db(20 * math.log10(ms) if ms > 0 else math.nan)}) "
            f"at {numfmt.eng(self.modulus_freq_hz, 'Hz')}"
            + ("" if self.modulus_margin_known else
               f" or less: |1+T| may dip lower unseen where the sweep has too few points "
               f"({self._gaps_text(self.modulus_margin_gaps_hz)})"),
            f"closed loop     {self._verdict_word()} "
            f"(open-loop RHP poles {self.open_loop_unstable_poles}, encirclements of -1: {self.encirclements})",
        ]
        if self.integrators_evidence:
            lines.append(f"integrators     {self.integrators_evidence}")
        lines += [
            "crossings:",
        ]
        quiet = []      # phase crossings far below 0 dB (a delay's spinning phase): summarised
        for c in self.crossings:
            tag = " (main)" if c.get("main") else ""
            if c["kind"] == "gain":
                lines.append(f"  gain  {numfmt.eng(c['freq_hz'], 'Hz', 4):>12}  PM {numfmt.deg(c['value']):>7}{tag}")
            elif c["value"] > _QUIET_GM_DB:
                quiet.append(c)
            else:
                lines.append(f"  phase {numfmt.eng(c['freq_hz'], 'Hz', 4):>12}  GM {numfmt.db(c['value']):>8}")
        if quiet:
            lines.append(f"  ... and {len(quiet)} phase crossing(s) with GM above {numfmt.db(_QUIET_GM_DB, 0)} "
                         f"between {numfmt.eng(quiet[0]['freq_hz'], 'Hz')} and {numfmt.eng(quiet[-1]['freq_hz'], 'Hz')} "
                         "(all listed in --json)")
        if not self.crossings:
            lines.append(f"  none {self.band_text()}")
        for w in self.warnings:
            lines.append(f"warning: {w}")
        return "\n".join(lines)
