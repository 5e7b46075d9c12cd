"""The one parser of option values: a number, an SI prefix, and a unit of the option's class.

Every option that takes a number names what it measures (:class:`Unit`): a frequency is in
hertz, a delay in seconds, a level in volts.  ``--delay 20kHz`` is then an error (a frequency
where a time belongs) instead of 20 000 s, and ``--level 20kHz`` never reaches a source.  A
value is checked against the option's range, and an empty value is an error, not "not given".

Two ways in, one rule:

* :func:`parse_value` for code that already holds the text (``--parts R1=10k``, ``--band``);
  it raises :class:`~benchfit.errors.InputError` naming the option;
* :func:`value` / :func:`count` / ... build ``type=`` callables for argparse, so a bad value is
  reported while the command line is parsed (one line, exit 2), before any file is read.

This module imports only the standard library: the parser is built from it at start-up.
"""

from __future__ import annotations

import argparse
import math
import re
from collections.abc import Callable, Sequence
from dataclasses import dataclass

from benchfit.errors import InputError
from benchfit.fileio import check_output_path

#: longest part of a value quoted back in a message
QUOTE_CHARS = 40


@dataclass(frozen=True)
class Unit:
    """What an option's number measures.

    Attributes
    ----------
    name
        The quantity, for messages ("a frequency").
    symbol
        The SI symbol the value is given in (``Hz``); empty for a plain number.
    spellings
        Unit words accepted after the number and prefix (case-sensitive).
    example
        An example value for messages.
    prefixes
        Whether SI prefixes (k, m, u, ...) are allowed.
    """

    name: str
    symbol: str
    spellings: tuple[str, ...]
    example: str
    prefixes: bool = True

    def describe(self) -> str:
        return f"{self.name} in {self.symbol}" if self.symbol else self.name


FREQUENCY = Unit("a frequency", "Hz", ("Hz", "hz", "HZ"), "10k or 2.5MHz")
TIME = Unit("a time", "s", ("s", "sec"), "2u or 150ns")
VOLTAGE = Unit("a voltage", "V", ("V", "v"), "0.1 or 100mV")
CURRENT = Unit("a current", "A", ("A",), "2 or 500mA")
RESISTANCE = Unit("a resistance", "ohm", ("ohm", "Ohm", "ohms", "Ω"), "10k or 4.7kohm")
CAPACITANCE = Unit("a capacitance", "F", ("F",), "4.7n or 100pF")
ANGLE = Unit("an angle", "degrees", ("deg", "°"), "45 or 45deg", prefixes=False)
DECIBEL = Unit("a level", "dB", ("dB", "db"), "10 or 10dB", prefixes=False)
PERCENT = Unit("a percentage", "%", ("%",), "5 or 5%", prefixes=False)
NUMBER = Unit("a number", "", (), "0.5 or 1e-3")

UNITS = (FREQUENCY, TIME, VOLTAGE, CURRENT, RESISTANCE, CAPACITANCE, ANGLE, DECIBEL, PERCENT)

_PREFIX = {"f": 1e-15, "p": 1e-12, "n": 1e-9, "u": 1e-6, "µ": 1e-6, "μ": 1e-6, "m": 1e-3,
           "k": 1e3, "K": 1e3, "M": 1e6, "meg": 1e6, "Meg": 1e6, "MEG": 1e6, "G": 1e9, "T": 1e12}
# a plain decimal number (no '1_000', no 'infinity'), then whatever follows
_NUMBER = re.compile(r"\s*([+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?|[+-]?inf)\s*(.*?)\s*$")


def quote(text: str) -> str:
    """``text`` quoted for a message, cut to about :data:`QUOTE_CHARS` characters."""
    r = repr(text[:QUOTE_CHARS])
    if len(text) > QUOTE_CHARS or len(r) > QUOTE_CHARS + 2:  # escapes make a repr longer
        return r[: QUOTE_CHARS + 1] + f"'... ({len(text)} characters)"
    return r


def _unit_of(suffix: str) -> tuple[float, Unit] | None:
    """(prefix multiplier, unit) for a suffix such as 'kHz', 'mV', 'Ω'; None if not understood."""
    for unit in UNITS:
        for spelling in unit.spellings:
            if suffix == spelling:
                return 1.0, unit
            if suffix.endswith(spelling) and unit.prefixes:
                mult = _PREFIX.get(suffix[: -len(spelling)])
                if mult is not None:
                    return mult, unit
    return None


@dataclass(frozen=True)
class Range:
    """Bounds a value must keep; ``None`` means no bound on that side.

    ``gt``/``lt`` are strict, ``ge``/``le`` inclusive. Infinite values are refused unless
    ``infinite`` is set (an option's range never silently takes "forever").
    """

    ge: float | None = None
    gt: float | None = None
    le: float | None = None
    lt: float | None = None
    infinite: bool = False
    nonzero: bool = False

    def check(self, x: float, text: str, unit: Unit) -> None:
        sym = f" {unit.symbol}" if unit.symbol and unit.symbol != "%" else unit.symbol
        if math.isnan(x) or (math.isinf(x) and not self.infinite):
            raise ValueError(f"{quote(text)}: expected a finite number")
        if self.nonzero and x == 0:
            raise ValueError(f"{quote(text)}: expected {unit.name} other than 0")
        for bound, ok, word in ((self.ge, lambda b: x >= b, "at least"),
                                (self.gt, lambda b: x > b, "above"),
                                (self.le, lambda b: x <= b, "at most"),
                                (self.lt, lambda b: x < b, "below")):
            if bound is not None and not ok(bound):
                raise ValueError(f"{quote(text)}: expected {unit.name} {word} {bound:g}{sym}")


POSITIVE = Range(gt=0)
NON_NEGATIVE = Range(ge=0)
#: any finite value but zero (a step may go down)
NONZERO = Range(nonzero=True)


def _parse(text: str, unit: Unit, rng: Range) -> float:
    """The number ``text`` gives in ``unit``'s SI unit; ValueError with the reason otherwise."""
    if text is None or not text.strip():
        raise ValueError("empty value; expected " + unit.describe() + f", e.g. {unit.example}")
    m = _NUMBER.fullmatch(text)
    if not m:
        raise ValueError(f"{quote(text)} is not a number; expected {unit.describe()}, "
                         f"e.g. {unit.example}")
    x = float(m.group(1))
    suffix = m.group(2)
    if suffix:
        if suffix in ("mhz", "MHZ"):
            raise ValueError(f"{quote(text)}: write mHz (millihertz) or MHz (megahertz)")
        found = _unit_of(suffix)
        if found is None and unit.prefixes and suffix in _PREFIX:
            found = (_PREFIX[suffix], unit)
        if found is None:
            raise ValueError(f"{quote(text)}: unit {quote(suffix)} not understood; expected "
                             f"{unit.describe()}, e.g. {unit.example}")
        mult, given = found
        if given is not unit:
            raise ValueError(f"{quote(text)} is {given.name} ({given.symbol}); expected "
                             f"{unit.describe()}, e.g. {unit.example}")
        x *= mult
    if math.isinf(x) and not math.isinf(float(m.group(1))):
        raise ValueError(f"{quote(text)} is too large")
    rng.check(x, text, unit)
    return x


def parse_value(text: str, option: str | None, unit: Unit = NUMBER, rng: Range = Range()) -> float:
    """Parse one option value (``'4.7k'``, ``'100nF'``, ``'2us'``) in ``unit``, within ``rng``.

    Parameters
    ----------
    text
        The value as typed.
    option
        The option name, for the message (``--delay``).
    unit
        What the value measures; a value written in another class's unit is an error.
    rng
        The range the value must be in.

    Raises
    ------
    InputError
        Naming ``option``: empty, not a number, a unit of another class, out of range.
    """
    try:
        return _parse(text, unit, rng)
    except ValueError as e:
        raise InputError(str(e), source=option) from None


def argtype(fn: Callable[[str], object], name: str) -> Callable[[str], object]:
    """An argparse ``type=`` from ``fn(text)``, which raises ValueError (or InputError) when bad.

    argparse puts "argument --option: " before the reason, so the reason names no option.
    """
    def convert(text: str):
        try:
            return fn(text)
        except InputError as e:  # its source, when it has one, is the file the value names
            # ... or the option itself, which argparse names already
            own = str(e.source or "").startswith("-") and e.line is None and e.column is None
            raise argparse.ArgumentTypeError(e.message if own else str(e)) from None
        except ValueError as e:
            raise argparse.ArgumentTypeError(str(e)) from None
    convert.__name__ = name
    return convert


def value(unit: Unit = NUMBER, rng: Range = POSITIVE, *, words: Sequence[str] = ()):
    """argparse ``type=``: a number in ``unit`` within ``rng``, or one of ``words`` (kept as text).

    ``words`` are keywords the option also takes (``auto``, ``none``), matched case-insensitively
    and returned in lower case.
    """
    def fn(text: str):
        if text.strip().lower() in words:
            return text.strip().lower()
        try:
            return _parse(text, unit, rng)
        except ValueError as e:
            if words and text.strip():
                raise ValueError(f"{e}; or {' or '.join(words)}") from None
            raise
    return argtype(fn, unit.name)


def parse_count(text: str, lo: int = 0, hi: int | None = None, *, words: Sequence[str] = ()):
    """A whole number ``lo <= n <= hi`` (or one of ``words``); ValueError otherwise."""
    t = (text or "").strip()
    if t.lower() in words:
        return t.lower()
    expected = "expected " + "".join(f"{w} or " for w in words) + "a whole number " \
        + (f"{lo}..{hi}" if hi is not None else f">= {lo}")
    if not re.fullmatch(r"[+-]?\d+", t):
        raise ValueError((f"{quote(text)}: " if t else "empty value; ") + expected)
    n = int(t)
    if n < lo or (hi is not None and n > hi):
        raise ValueError(f"{quote(text)}: {expected}")
    return n


def count(lo: int = 0, hi: int | None = None, *, words: Sequence[str] = ()):
    """argparse ``type=``: a whole number within ``lo..hi`` (or one of ``words``)."""
    return argtype(lambda t: parse_count(t, lo, hi, words=words), "count")


#: random seeds: numpy's generators take any whole number >= 0
SEED = count(0)


def _text(t: str) -> str:
    if not t.strip():
        raise ValueError("empty value")
    return t


#: argparse ``type=`` for a plain word (a channel name, a column list): an empty value is an error
text = argtype(_text, "text")


def parse_range(text: str, option: str | None, unit: Unit, rng: Range = POSITIVE, *,
                open_ends: bool = True, form: str = "LO:HI") -> tuple[float | None, float | None]:
    """``'LO:HI'`` in ``unit`` (either side may be empty when ``open_ends``) -> (lo, hi).

    ``form`` names the two values in the message (``FMIN:FMAX``, ``RTOP:RBOT``).
    """
    expected = f"expected {form}, each {unit.describe()}"
    if text is None or not text.strip():
        raise InputError(f"empty value; {expected}", source=option or None)
    lo_t, sep, hi_t = text.partition(":")
    if not sep or (not lo_t.strip() and not hi_t.strip()):
        raise InputError(f"{quote(text)}: {expected}", source=option or None)
    sides = []
    for t in (lo_t, hi_t):
        if not t.strip():
            if not open_ends:
                raise InputError(f"{quote(text)}: {expected}, both given", source=option or None)
            sides.append(None)
        else:
            sides.append(parse_value(t, option or None, unit, rng))
    return sides[0], sides[1]


#: argparse ``type=`` for ``--band FMIN:FMAX`` in Hz; either side may be empty
band = argtype(lambda t: parse_range(t, None, FREQUENCY, form="FMIN:FMAX"), "band")


def pair(unit: Unit, rng: Range = POSITIVE, form: str = "A:B"):
    """argparse ``type=`` for ``A:B``, both given, each in ``unit`` (``--divider 30k:10k``)."""
    return argtype(lambda t: parse_range(t, None, unit, rng, open_ends=False, form=form), "pair")


def _output(t: str) -> str:
    check_output_path(_text(t))  # a folder, device or pipe is refused before any work is done
    return t


#: argparse ``type=`` for an output file name (``-o``): not empty, and a new name or a regular
#: file (:func:`benchfit.fileio.check_output_path`); every writer checks again when it writes
output = argtype(_output, "output")
