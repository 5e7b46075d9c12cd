"""What a sweep column holds, from its name (and unit row cell).

Names come in many forms: ``Frequency (Hz)``, ``freq_khz``, ``f/MHz``,
``Gain (dB)``, ``dB(S21)``, ``magS21``, ``Phase [°]``, ``ReS21``,
``Z real [Ohm]``, ``Coherence``.  :func:`classify` maps one name to a
:class:`Column` (role, unit, form); :func:`pair_traces` groups the columns of
a header into traces (a magnitude/phase or real/imaginary pair each).
"""

from __future__ import annotations

import re
from dataclasses import dataclass

from benchfit.data.quote import cut, quote
from benchfit.data.units import find_freq_unit
from benchfit.errors import InputError

ROLES = ("freq", "mag", "phase", "re", "im", "coherence", "stddev", "weight", "skip")

_UNIT_PROTECT = re.compile(r"(GHz|MHz|kHz|KHz|mHz|Hz|HZ|dB|DB|Ohm|OHM|V/V|°|Ω)")
_FREQ_WORDS = {"f", "freq", "frequency", "frequenz", "fréquence", "frecuencia", "hz", "khz", "mhz",
               "ghz", "hertz"}
_RE_WORDS = {"re", "real", "realpart"}
_IM_WORDS = {"im", "imag", "imaginary", "imagpart"}
_PHASE_WORDS = {"phase", "ph", "phi", "arg", "angle", "ang", "deg", "degree", "degrees", "°", "rad",
                "radian", "radians", "phase_deg", "phase_rad"}
_MAG_WORDS = {"gain", "mag", "magnitude", "amplitude", "ampl", "amp", "abs", "db", "level",
              "modulus", "lin", "linear", "ratio", "ohm", "ohms", "ω", "v/v", "attenuation"}
_DB_WORDS = {"db"}
_LIN_WORDS = {"lin", "linear", "ratio", "ohm", "ohms", "ω", "v/v", "abs", "x"}
_RAD_WORDS = {"rad", "radian", "radians"}
_DEG_WORDS = {"deg", "degree", "degrees", "°"}
_IMPEDANCE_WORDS = {"ohm", "ohms", "ω", "z", "zout", "impedance", "zo"}
_ROLE_WORDS = (_FREQ_WORDS | _RE_WORDS | _IM_WORDS | _PHASE_WORDS | _MAG_WORDS
               | {"part", "of", "in", "coherence", "coh", "std", "stddev", "sigma", "weight", "w",
                  "v", "unit", "units"})


@dataclass(frozen=True)
class Column:
    """One column's meaning.

    Attributes
    ----------
    index
        0-based position in the row.
    name
        The name as written (with the unit row cell appended when there is one).
    role
        One of :data:`ROLES`, or ``"other"`` when the name says nothing known.
    unit
        Frequency unit for the frequency column ('Hz', 'kHz', ...), else None.
    form
        'db' / 'linear' for a magnitude, 'deg' / 'rad' for a phase, 'auto' when unstated.
    impedance
        True when the name says ohms / impedance.
    label
        What is left of the name after role and unit words (tells traces apart).
    written_unit
        The unit as written (in brackets, after a '/', or in the unit row), or None.
    """

    index: int
    name: str
    role: str
    unit: str | None = None
    form: str = "auto"
    impedance: bool = False
    label: str = ""
    written_unit: str | None = None

    def to_dict(self) -> dict:
        return {"index": self.index, "name": self.name, "role": self.role, "unit": self.unit,
                "form": self.form}


def tokens(name: str) -> list[str]:
    """Lower-case words of a column name, with camel case (``ReS21``) and units split out."""
    parts = _UNIT_PROTECT.split(name)
    out: list[str] = []
    for k, part in enumerate(parts):
        if k % 2 == 1:  # a protected unit
            out.append(part.lower())
            continue
        part = re.sub(r"(?<=[a-z])(?=[A-Z])", " ", part)
        out.extend(t.lower() for t in re.split(r"[^0-9A-Za-zµμ°Ω]+", part) if t)
    if "|" in name:
        out.append("|")
    return out


_BRACKETED = re.compile(r"[\(\[]\s*([^\)\]]*?)\s*[\)\]]\s*$")
_SLASHED = re.compile(r"^\s*[A-Za-z]+\s*/\s*([^/\s]+)\s*$")


def written_unit(name: str, unit_cell: str | None = None) -> str | None:
    """The unit a column's name states: 'Frequency (kHz)' -> 'kHz', 'f/MHz' -> 'MHz', or the
    unit row's cell; None when none is written."""
    if unit_cell and unit_cell.strip():
        return unit_cell.strip().strip("[]() ") or None
    m = _BRACKETED.search(name) or _SLASHED.match(name)
    return m.group(1).strip() or None if m else None


def is_phase_unit(text: str) -> bool:
    """True when ``text`` names degrees or radians ('deg', '°', 'rad', 'radians'...)."""
    return "°" in text or bool(set(tokens(text)) & (_DEG_WORDS | _RAD_WORDS))


def classify(name: str, index: int, unit_cell: str | None = None) -> Column:
    """Role, unit and form of one column from its name (and its unit row cell)."""
    full = f"{name} ({unit_cell})" if unit_cell and unit_cell.strip() else name
    words = tokens(full)
    ws = set(words)
    imp = bool(ws & _IMPEDANCE_WORDS)
    label = " ".join(w for w in words if w not in _ROLE_WORDS and find_freq_unit(w) is None
                     and w != "|")
    role, unit, form = "other", None, "auto"
    if any(w.startswith("coh") for w in words):
        role = "coherence"
    elif ws & {"std", "stddev", "sigma", "stdev", "uncertainty"}:
        role = "stddev"
    elif ws & {"weight", "weights"}:
        role = "weight"
    elif ws & _FREQ_WORDS or any(w.startswith("freq") for w in words):
        role = "freq"
        unit = find_freq_unit(full)
    elif ws & _RE_WORDS:
        role = "re"
    elif ws & _IM_WORDS:
        role = "im"
    elif ws & _PHASE_WORDS:
        role = "phase"
        form = "rad" if ws & _RAD_WORDS else "deg" if ws & _DEG_WORDS else "auto"
    elif ws & _MAG_WORDS or "|" in ws:
        role = "mag"
        form = "db" if ws & _DB_WORDS else "linear" if (ws & _LIN_WORDS or "|" in ws) else "auto"
    elif ws & {"skip", "-", "ignore"} or name.strip() in ("-", "_"):
        role = "skip"
    return Column(index=index, name=full, role=role, unit=unit, form=form, impedance=imp, label=label,
                  written_unit=written_unit(name, unit_cell))


def classify_all(names: list[str], units: list[str] | None = None) -> list[Column]:
    return [classify(n, i, units[i] if units and i < len(units) else None) for i, n in enumerate(names)]


@dataclass(frozen=True)
class TracePair:
    """The columns that make one trace: frequency plus mag/phase or re/im (plus extras)."""

    freq: Column
    first: Column  # mag or re
    second: Column  # phase or im
    extras: tuple[Column, ...] = ()

    @property
    def kind(self) -> str:
        return "mag_phase" if self.first.role == "mag" else "re_im"

    @property
    def label(self) -> str:
        return (self.first.label or self.second.label).strip()

    def columns(self) -> list[Column]:
        return [self.freq, self.first, self.second, *self.extras]


def pair_traces(cols: list[Column]) -> tuple[list[TracePair], list[str]]:
    """Group columns into traces, in order; return (traces, warnings about unpaired columns).

    A magnitude pairs with the nearest following (or waiting) phase, a real part with
    an imaginary part.  Each trace takes the last frequency column before it;
    coherence / stddev / weight columns go with the trace before them.
    """
    freqs = [c for c in cols if c.role == "freq"]
    warnings: list[str] = []
    pairs: list[list] = []
    waiting: dict[str, Column] = {}
    partner = {"mag": "phase", "phase": "mag", "re": "im", "im": "re"}
    last_pair: list | None = None
    early_extras: list[Column] = []
    for c in cols:
        if c.role in partner:
            other = partner[c.role]
            if other in waiting:
                o = waiting.pop(other)
                first, second = (o, c) if o.role in ("mag", "re") else (c, o)
                f = [x for x in freqs if x.index < min(first.index, second.index)]
                last_pair = [f[-1] if f else (freqs[0] if freqs else None), first, second,
                             early_extras if not pairs else []]
                pairs.append(last_pair)
            elif c.role in waiting:
                warnings.append(f"column {quote(waiting[c.role].name)} has no partner column; ignored")
                waiting[c.role] = c
            else:
                waiting[c.role] = c
        elif c.role in ("coherence", "stddev", "weight"):
            (last_pair[3] if last_pair is not None else early_extras).append(c)
    for c in waiting.values():
        warnings.append(f"column {quote(c.name)} has no partner column; ignored")
    out = [TracePair(freq=p[0], first=p[1], second=p[2], extras=tuple(p[3])) for p in pairs if p[0]]
    return out, warnings


def check_units(pair: TracePair, freq_unit: str | None, phase: str, source: str,
                 header_line: int | None) -> None:
    """Refuse a frequency or phase column whose written unit is not one benchfit knows.

    ``Frequency (furlongs)`` must not be read as Hz, nor ``Phase (grad)`` as degrees;
    an override (``freq_unit``, ``phase``) says what the column holds instead.
    """
    u = pair.freq.written_unit
    if freq_unit is None and u is not None and find_freq_unit(u) is None:
        raise InputError(f"unit {quote(u)} of the frequency column is not a frequency unit; "
                         "expected Hz, kHz, MHz or GHz (or give freq_unit=, --freq-unit)",
                         source=source, line=header_line, column=cut(pair.freq.name, 40))
    if pair.kind == "mag_phase" and phase == "auto":
        u = pair.second.written_unit
        if u is not None and not is_phase_unit(u):
            raise InputError(f"unit {quote(u)} of the phase column is not a phase unit; expected "
                             "deg or rad (or give phase=, --phase-deg / --phase-rad)",
                             source=source, line=header_line, column=cut(pair.second.name, 40))
