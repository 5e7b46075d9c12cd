"""The one way benchfit writes a number for a person to read.

Every human view (command output, fit and design reports, the HTML/PDF report,
plot labels and annotations) formats numbers here, so one value reads the
same everywhere.  ``--json`` and CSV files are not formatted: they carry plain
SI numbers.

The rules
---------
* SI prefixes in steps of 10³ (f p n µ m – k M G T), attached to the unit
  symbol: ``19.6 kHz``, ``2.7 nF``, ``604 Ω``, ``8.06 µs``.
* A fixed number of significant figures, 3 unless a caller asks for more
  (part values of an ideal design: 4); trailing zeros are not written
  (``20 kHz``, ``10 kΩ``).
* One spacing rule: one space between the number and its unit (SI Brochure,
  9th edition, 2019, section 5.4.3), including before ``%`` and ``dB``; the
  degree sign of a plane angle is the brochure's exception and is written
  without a space (``56.8°``).
* Angles, decibels and percentages have a fixed number of decimals instead
  (0.1° / 0.1 dB / 0.1 %), because they are read as differences against a
  target and are never prefixed.
* Unit names are written as symbols: ``ohm`` → ``Ω``, ``deg`` → ``°``.
* A value that is not a finite number is written as ``not defined`` (NaN) or
  ``none (∞)``; a caller that knows *why* a value is not defined says so in
  words instead (see :func:`or_reason`).
"""

from __future__ import annotations

import math
from typing import Any

_PREFIXES = {-15: "f", -12: "p", -9: "n", -6: "µ", -3: "m", 0: "", 3: "k", 6: "M", 9: "G", 12: "T"}
_SYMBOLS = {"ohm": "Ω", "Ohm": "Ω", "ohms": "Ω", "deg": "°", "degree": "°", "degrees": "°", "us": "µs",
            "1": "", "V/V": "V/V"}
#: Significant figures of a measured or predicted value.
DIGITS = 3
#: Significant figures of a fitted parameter (its table, the fit report, the Q written on the fit picture).
FIT_DIGITS = 4
#: What a NaN reads as when the caller gives no reason.
NOT_DEFINED = "not defined"
INFINITE = "none (∞)"


def unit_symbol(unit: str) -> str:
    """The symbol a person reads for a unit name: ``'ohm' -> 'Ω'``, ``'deg' -> '°'``, ``'1' -> ''``."""
    return _SYMBOLS.get(unit, unit)


def _finite(value: Any) -> float | None:
    try:
        x = float(value)
    except (TypeError, ValueError):
        return None
    return x if math.isfinite(x) else None


def _not_finite(value: Any, unit: str = "") -> str:
    try:
        x = float(value)
    except (TypeError, ValueError):
        return NOT_DEFINED
    if math.isinf(x):
        return INFINITE if x > 0 else f"-∞{(' ' + unit) if unit else ''}"
    return NOT_DEFINED


def sig(value: float, digits: int = DIGITS) -> str:
    """A plain number with ``digits`` significant figures, no exponent between 1e-4 and 1e6.

    ``sig(0.8213) -> '0.821'``, ``sig(17.63) -> '17.6'``, ``sig(2.0) -> '2'``.
    """
    x = _finite(value)
    if x is None:
        return _not_finite(value)
    if x == 0:
        return "0"
    mag = math.floor(math.log10(abs(x)))
    if -4 <= mag < 6:
        places = digits - 1 - mag
        decimals = max(places, 0)
        text = f"{round(x, places):.{decimals}f}"
        if "." in text:
            text = text.rstrip("0").rstrip(".")
        # rounding may carry into one more digit (99.96 -> 100.0): still at most `digits` figures
        return "0" if text in ("-0", "") else text
    return f"{x:.{digits}g}".replace("e+0", "e").replace("e+", "e").replace("e-0", "e-")


def eng(value: float | None, unit: str = "", digits: int = DIGITS) -> str:
    """Engineering text of a value in SI base units: ``eng(19560, 'Hz') -> '19.6 kHz'``.

    Parameters
    ----------
    value
        The number in SI base units (Hz, s, Ω, F, V, A).
    unit
        Unit name or symbol (``'ohm'`` is written ``Ω``); empty: the prefix
        stands alone (``eng(1e4) -> '10k'``, as on a tick label).
    digits
        Significant figures (default 3).
    """
    sym = unit_symbol(unit)
    x = _finite(value)
    if x is None:
        return _not_finite(value, sym)
    if x == 0:
        return f"0 {sym}" if sym else "0"
    exp3 = int(math.floor(math.log10(abs(x)) / 3.0) * 3)
    if exp3 > 12 or exp3 < -15:
        text = f"{x:.{digits}g}"
        return f"{text} {sym}" if sym else text
    mant = x / 10.0 ** exp3
    text = sig(mant, digits)
    if abs(float(text)) >= 1000.0 and exp3 < 12:   # rounding carried into the next prefix (999.9 -> 1000)
        exp3 += 3
        text = sig(x / 10.0 ** exp3, digits)
    return f"{text} {_PREFIXES[exp3]}{sym}" if sym else f"{text}{_PREFIXES[exp3]}"


def deg(value: float, decimals: int = 1) -> str:
    """An angle in degrees: ``deg(56.81) -> '56.8°'`` (no space: SI Brochure 5.4.3)."""
    x = _finite(value)
    if x is None:
        return _not_finite(value, "°")
    return f"{x:.{decimals}f}°"


def db(value: float, decimals: int = 1) -> str:
    """A level in decibels: ``db(32.84) -> '32.8 dB'``."""
    x = _finite(value)
    if x is None:
        return _not_finite(value, "dB")
    return f"{x:.{decimals}f} dB"


def pct(fraction: float, decimals: int = 1) -> str:
    """A fraction as a percentage: ``pct(0.942) -> '94.2 %'``."""
    x = _finite(fraction)
    if x is None:
        return _not_finite(fraction, "%")
    return f"{100.0 * x:.{decimals}f} %"


def db_per_decade(value: float) -> str:
    """A slope: ``db_per_decade(21.4) -> '21 dB/decade'`` (whole dB: a slope is read against 20 or 40)."""
    x = _finite(value)
    if x is None:
        return _not_finite(value, "dB/decade")
    return f"{x:.0f} dB/decade"


def quantity(value: float, unit: str, digits: int = DIGITS) -> str:
    """Dispatch on the unit: ``°``/``deg`` → :func:`deg`, ``dB`` → :func:`db`, ``%`` of a
    percentage value, anything else → :func:`eng` (an empty unit: :func:`sig`)."""
    sym = unit_symbol(unit)
    if sym == "°":
        return deg(value)
    if sym == "dB":
        return db(value)
    if sym == "%":
        x = _finite(value)
        return _not_finite(value, "%") if x is None else f"{sig(x, digits)} %"
    if not sym:
        return sig(value, digits)
    return eng(value, sym, digits)


def to_resolution(value: float, resolution: float) -> float:
    """``value`` with what lies below half of ``resolution`` read as zero.

    For a figure known only to a step (a sample time is known to the sample
    interval): ``to_resolution(-1.36e-20, 500e-9) -> 0.0``, so the text reads
    ``0 s`` rather than the rounding residue of the time axis.  Larger values
    are returned as they are; a resolution that is not a finite positive
    number changes nothing.
    """
    x = _finite(value)
    r = _finite(resolution)
    if x is None or r is None or r <= 0:
        return value
    return 0.0 if abs(x) < 0.5 * r else x


def or_reason(value: float, text: str, reason: str) -> str:
    """``text`` when ``value`` is a finite number, else ``reason`` (the words saying why it is not defined)."""
    return text if _finite(value) is not None else reason


def tick(value: float, _pos: Any = None) -> str:
    """A tick label on a log axis: ``1``, ``10``, ``100``, ``1k``, ``10k``, ``1M``."""
    return eng(value, "", digits=3)
