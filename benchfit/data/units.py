"""Unit words found in exported files: frequency, time and signal scales.

Instruments write units in column names (``Frequency (kHz)``, ``t/ms``,
``freq_hz``), in a unit row under the names, or in metadata lines
(``Sample Interval: 200 ns``).  These helpers map those words to SI factors.
"""

from __future__ import annotations

import re
from collections.abc import Sequence

import numpy as np

from benchfit.errors import InputError

#: Frequency unit -> factor to Hz.  Only the exact spelling ``mHz`` means millihertz;
#: every other case of ``mhz`` is read as megahertz, which is what exports mean by it.
FREQ_UNITS = {"hz": 1.0, "khz": 1e3, "mhz": 1e6, "ghz": 1e9, "hertz": 1.0}

#: Time unit -> factor to s.
TIME_UNITS = {
    "s": 1.0, "sec": 1.0, "secs": 1.0, "second": 1.0, "seconds": 1.0,
    "ms": 1e-3, "us": 1e-6, "µs": 1e-6, "μs": 1e-6, "ns": 1e-9, "ps": 1e-12,
}

#: Signal unit -> (factor to the SI unit, SI unit).
SIGNAL_UNITS = {
    "v": (1.0, "V"), "mv": (1e-3, "V"), "uv": (1e-6, "V"), "µv": (1e-6, "V"), "μv": (1e-6, "V"),
    "kv": (1e3, "V"), "a": (1.0, "A"), "ma": (1e-3, "A"), "ua": (1e-6, "A"), "µa": (1e-6, "A"),
    "μa": (1e-6, "A"), "w": (1.0, "W"),
}

_FREQ_RE = re.compile(r"(?<![A-Za-z])(hertz|[kKmMgG]?(?:Hz|HZ|hz|hZ))(?![A-Za-z])")
_TIME_RE = re.compile(r"(?<![a-zµμ])(seconds|second|secs|sec|ms|us|µs|μs|ns|ps|s)(?![a-z])")
_SIGNAL_RE = re.compile(r"(?<![a-zµμ])(mv|uv|µv|μv|kv|v|ma|ua|µa|μa|a|w)(?![a-z])")


def freq_factor(word: str, *, exact_case: bool = True) -> float:
    """Factor from a frequency unit word to Hz ('kHz' -> 1e3).

    With ``exact_case`` the spelling ``mHz`` means millihertz.

    Raises
    ------
    InputError
        When ``word`` is not a frequency unit.
    """
    w = word.strip()
    if exact_case and w == "mHz":
        return 1e-3
    try:
        return FREQ_UNITS[w.lower()]
    except KeyError:
        raise InputError(f"{word!r} is not a frequency unit; expected Hz, kHz, MHz or GHz",
                         source="--freq-unit") from None


def freq_to_hz(values: np.ndarray, unit: str, *, source: str, lines: Sequence[int],
               column: str | int | None = None) -> np.ndarray:
    """Frequencies written in ``unit`` converted to Hz, refusing any that overflow.

    ``1e300 GHz`` is a finite number in the file but not in Hz; numpy would print
    a RuntimeWarning and carry on with inf.  Here the first such value is an
    InputError naming the file, its line and column.

    Parameters
    ----------
    values
        Frequencies as written, in ``unit``.
    unit
        A frequency unit word ('GHz'; 'mHz' is millihertz).
    source
        File name, for the message.
    lines
        1-based line number of each value.
    column
        Column name or index, when there is one.
    """
    v = np.asarray(values, dtype=float)
    with np.errstate(over="ignore", invalid="ignore"):
        hz = v * freq_factor(unit)
    bad = np.flatnonzero(~np.isfinite(hz))
    if bad.size:
        k = int(bad[0])
        raise InputError(f"frequency {v[k]:g} {unit} is too large to represent in Hz; check the "
                         "frequency unit", source=source, line=int(lines[k]), column=column)
    return hz


def freq_unit_name(word: str, *, exact_case: bool = True) -> str:
    """The usual spelling of a frequency unit word ('khz' -> 'kHz', 'MHZ' -> 'MHz')."""
    names = {1e-3: "mHz", 1.0: "Hz", 1e3: "kHz", 1e6: "MHz", 1e9: "GHz"}
    return names[freq_factor(word, exact_case=exact_case)]


def find_freq_unit(text: str) -> str | None:
    """The frequency unit written in ``text`` (a column name or unit cell), or None."""
    m = _FREQ_RE.search(text)
    return m.group(1) if m else None


def find_time_unit(text: str) -> str | None:
    """The time unit written in ``text`` ('Time (us)' -> 'us'), or None."""
    m = _TIME_RE.search(text.lower())
    return m.group(1) if m else None


def time_factor(word: str, source: str = "--time-unit") -> float:
    """Factor from a time unit word to s ('us' -> 1e-6)."""
    try:
        return TIME_UNITS[word.strip().lower()]
    except KeyError:
        raise InputError(f"{word!r} is not a time unit; expected s, ms, us or ns", source=source) from None


def find_signal_unit(text: str) -> tuple[float, str] | None:
    """(factor, SI unit) of the signal unit written in ``text`` ('CH2 (mV)' -> (1e-3, 'V'))."""
    m = _SIGNAL_RE.search(text.lower())
    return SIGNAL_UNITS[m.group(1)] if m else None


_QTY_RE = re.compile(r"^\s*([+-]?(?:\d+[.,]?\d*|[.,]\d+)(?:[eE][+-]?\d+)?)\s*([A-Za-zµμ/]*)\s*$")
_PREFIX = {"p": 1e-12, "n": 1e-9, "u": 1e-6, "µ": 1e-6, "μ": 1e-6, "m": 1e-3, "k": 1e3,
           "K": 1e3, "M": 1e6, "G": 1e9}


def parse_quantity(text: str) -> tuple[float, str] | None:
    """'200 ns' -> (200.0, 'ns'); '2,0E-07' -> (2e-7, ''); None when not a number.

    A decimal comma is accepted (there is never more than one number here).
    """
    m = _QTY_RE.match(text)
    if not m:
        return None
    try:
        return float(m.group(1).replace(",", ".")), m.group(2)
    except ValueError:
        return None


def time_value_s(text: str, default_unit: str = "s") -> float | None:
    """A time written with an optional unit ('0.2 us', '2E-07', '200ns') in s, or None."""
    q = parse_quantity(text)
    if q is None:
        return None
    value, unit = q
    unit = unit or default_unit
    if unit.lower() in TIME_UNITS:
        return float(f"{value * TIME_UNITS[unit.lower()]:.15g}")  # -100 us -> -1e-4, not -9.99..e-5
    return None


def rate_value_hz(text: str) -> float | None:
    """A sample rate ('1 MSa/s', '2.5e9', '500 kS/s', '1 MHz') in samples per s, or None."""
    q = parse_quantity(text)
    if q is None:
        return None
    value, unit = q
    unit = unit.replace("Sa/s", "").replace("S/s", "").replace("sa/s", "").replace("Hz", "")
    unit = unit.replace("/s", "")
    if not unit:
        return value
    if unit in _PREFIX:
        return value * _PREFIX[unit]
    return None
