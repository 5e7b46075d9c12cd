"""Touchstone version 1 files (.s1p, .s2p, ... .sNp).

The format is the open standard of the IBIS Open Forum ("Touchstone File
Format Specification", version 1.1):

* ``!`` starts a comment, anywhere on a line;
* the option line ``# <freq unit> <parameter> <format> R <ohms>`` comes before
  the data; every field is optional, defaults ``GHz S MA R 50``; only the first
  option line counts;
* formats: RI (real, imaginary), MA (magnitude, angle in degrees), DB (dB, angle
  in degrees);
* two-port data are ordered N11 N21 N12 N22 on one line; other port counts
  are row-major (N11 N12 ... N1n N21 ...), wrapped over lines;
* Z and Y parameters are normalised to R (so Z = value·R, Y = value/R);
* a two-port file may end with noise parameters, which start where the
  frequency stops increasing; they are not read.
"""

from __future__ import annotations

import io
import os
import re
from dataclasses import dataclass

import numpy as np

from benchfit.data.quote import cut, quote
from benchfit.data.rowparse import PANDAS_MIN_CELLS
from benchfit.data.rows import is_marker, value_problem
from benchfit.data.units import freq_to_hz
from benchfit.errors import InputError

_EXT = re.compile(r"\.s(\d+)p$", re.IGNORECASE)
_FREQ = {"hz": 1.0, "khz": 1e3, "mhz": 1e6, "ghz": 1e9}
_OPTION_WORDS = {"hz", "khz", "mhz", "ghz", "s", "y", "z", "h", "g", "ma", "ri", "db", "r"}


def _is_option_line(s: str) -> bool:
    """'# GHz S MA R 50': every word an option word (the number only after R)."""
    toks = s.lstrip()[1:].split()
    if not toks:
        return False
    for k, t in enumerate(toks):
        if t.lower() in _OPTION_WORDS:
            continue
        if k > 0 and toks[k - 1].lower() == "r":
            try:
                float(t)
                continue
            except ValueError:
                return False
        return False
    return True


@dataclass(frozen=True)
class TouchstoneData:
    """One parameter read from a Touchstone file.

    Attributes
    ----------
    freq_hz
        Frequencies in Hz, as in the file.
    values
        Complex values of the chosen parameter (Z in ohm, Y in S after de-normalising).
    ports
        Port count.
    options
        The option line as understood: freq_unit, parameter, format, r_ohm, line.
    param
        Name of the parameter read, e.g. 'S21'.
    """

    freq_hz: np.ndarray
    values: np.ndarray
    ports: int
    options: dict
    param: str


def ports_from_name(path: str | os.PathLike) -> int | None:
    """Port count from a '.sNp' extension, or None."""
    m = _EXT.search(str(path))
    return int(m.group(1)) if m else None


def looks_like_touchstone(path: str | os.PathLike, text: str) -> bool:
    """True for a '.sNp' name, or text whose first non-comment line is an option line."""
    if ports_from_name(path):
        return True
    for line in text[:65536].splitlines():
        s = line.split("!", 1)[0].strip()
        if s:
            return s.startswith("#") and _is_option_line(s)
    return False


def _options(line: str, source: str, lineno: int) -> dict:
    opts = {"freq_unit": "GHz", "parameter": "S", "format": "MA", "r_ohm": 50.0, "line": lineno}
    toks = line.lstrip()[1:].split()
    i = 0
    while i < len(toks):
        t = toks[i].lower()
        if t in _FREQ:
            opts["freq_unit"] = {"hz": "Hz", "khz": "kHz", "mhz": "MHz", "ghz": "GHz"}[t]
        elif t in ("s", "y", "z", "h", "g"):
            opts["parameter"] = t.upper()
        elif t in ("ma", "ri", "db"):
            opts["format"] = t.upper()
        elif t == "r":
            if i + 1 >= len(toks):
                raise InputError("option line: 'R' must be followed by the reference resistance",
                                 source=source, line=lineno)
            try:
                opts["r_ohm"] = float(toks[i + 1])
            except ValueError:
                raise InputError(f"option line: reference resistance {quote(toks[i + 1])} is not a number",
                                 source=source, line=lineno) from None
            if not (np.isfinite(opts["r_ohm"]) and opts["r_ohm"] > 0):
                raise InputError(f"option line: reference resistance {cut(toks[i + 1])} must be a "
                                 "finite number > 0", source=source, line=lineno)
            i += 1
        else:
            raise InputError(
                f"unknown option {quote(toks[i])} in the option line; expected a frequency unit "
                "(Hz kHz MHz GHz), a parameter (S Y Z H G), a format (MA RI DB) or 'R <ohms>'",
                source=source, line=lineno)
        i += 1
    return opts


def _param_index(param: str, ports: int, kind: str, source: str) -> tuple[int, int, str]:
    m = re.fullmatch(r"\s*([SYZHG])?(\d)(\d)\s*", param, re.IGNORECASE)
    if not m:
        raise InputError(f"{quote(param)} is not a parameter name; expected e.g. S21 or S11", source="--param")
    letter = (m.group(1) or kind).upper()
    if letter != kind:
        raise InputError(f"{source} holds {kind} parameters; asked for {param!r} "
                         f"(use e.g. {kind}{'21' if ports == 2 else '11'})", source="--param")
    i, j = int(m.group(2)), int(m.group(3))
    if not (1 <= i <= ports and 1 <= j <= ports):
        raise InputError(f"{param!r} does not exist in a {ports}-port file", source="--param")
    return i - 1, j - 1, f"{letter}{i}{j}"


def _fast_table(lines: list[str], m: int) -> np.ndarray | None:
    """One point per line, converted at once (pandas' C parser for a large file, numpy below
    :data:`~benchfit.data.rowparse.PANDAS_MIN_CELLS`); None when anything is off."""
    if len(lines) * m < PANDAS_MIN_CELLS:
        if any(not ln.isascii() or "_" in ln or '"' in ln for ln in lines):
            return None  # what pandas' parser refuses too (Python's float takes '1_0', '١')
        cells = [ln.split() for ln in lines]
        if any(len(c) != m for c in cells):
            return None
        try:
            table = np.array([c for row in cells for c in row], dtype=float).reshape(len(lines), m)
        except ValueError:
            return None
    else:
        import pandas as pd  # here: its import costs more than it saves on an ordinary file

        try:
            frame = pd.read_csv(io.StringIO("\n".join(lines)), sep=r"\s+", header=None, dtype=float,
                                engine="c")
        except (ValueError, pd.errors.ParserError, pd.errors.EmptyDataError):
            return None
        table = frame.to_numpy(dtype=float)
    if table.shape != (len(lines), m) or not np.all(np.isfinite(table)) or np.any(is_marker(table)):
        return None
    return table


def _slow_table(lines: list[str], line_no: list[int], ports: int, m: int,
                source: str) -> tuple[np.ndarray, list[int]]:
    """Token by token, with line numbers for errors; stops at two-port noise data.

    Returns the table and, for each row, the line its frequency is on.
    """
    values: list[float] = []
    counts: list[int] = []
    where: list[int] = []
    for s, k in zip(lines, line_no, strict=True):
        toks = s.split()
        for t in toks:
            try:
                v = float(t)
            except ValueError:
                raise InputError(f"non-numeric value {quote(t)}; expected a number", source=source,
                                 line=k) from None
            why = value_problem(t, v)  # not finite, or a SCPI 9.91E37 / 9.9E37 marker
            if why:
                raise InputError(why, source=source, line=k)
            values.append(v)
            where.append(k)
        counts.append(len(toks))
    arr = np.asarray(values)
    if ports > 2:
        if arr.size % m:
            raise InputError(f"{arr.size} values do not make whole points of {m} values each",
                             source=source, line=where[-1])
        return arr.reshape(-1, m), where[::m]
    rows, rows_at, last_f, pos = [], [], -np.inf, 0
    for k, count in zip(line_no, counts, strict=True):
        if ports == 2 and count == 5 and rows and arr[pos] <= last_f:
            break  # noise parameters begin
        if count != m:
            raise InputError(f"{count} values, expected {m} (frequency + {m - 1} for a "
                             f"{ports}-port)", source=source, line=k)
        rows.append(arr[pos:pos + m])
        rows_at.append(k)
        last_f = arr[pos]
        pos += count
    return np.vstack(rows), rows_at


def read_touchstone(text: str, source: str, *, param: str | None = None,
                    ports: int | None = None) -> TouchstoneData:
    """Parse Touchstone v1 ``text`` and return one parameter.

    Parameters
    ----------
    text
        File contents.
    source
        File name, for messages.
    param
        Parameter to read ('S21', '11', 'Z11'...).  Default S21 for a two-port,
        N11 otherwise.
    ports
        Port count (from the extension); inferred from the first data line if None.

    Raises
    ------
    InputError
        Unknown option, non-numeric value, wrong value count (with line numbers),
        bad parameter name.
    """
    opts: dict | None = None
    data_lines: list[str] = []
    data_no: list[int] = []
    for k, raw in enumerate(text.splitlines(), start=1):
        s = (raw.split("!", 1)[0] if "!" in raw else raw).strip()
        if not s:
            continue
        if s[0] == "#":
            if opts is None:
                opts = _options(s, source, k)
            continue  # later option lines are ignored, as the standard says
        if s[0] == "[":
            raise InputError(f"Touchstone 2 keyword {quote(s.split()[0])}; only version 1 files are read",
                             source=source, line=k)
        data_lines.append(s)
        data_no.append(k)
    if opts is None:
        opts = _options("#", source, 0)
        opts["line"] = None
    if not data_lines:
        raise InputError("no data lines; expected frequency and parameter values", source=source)
    if ports is None:
        first = len(data_lines[0].split())
        ports = {3: 1, 9: 2}.get(first)
        if ports is None:
            raise InputError(f"cannot tell the port count from {first} values on the first data line; "
                             "name the file .s1p / .s2p / .sNp", source=source, line=data_no[0])
    m = 1 + 2 * ports * ports
    table = _fast_table(data_lines, m) if ports <= 2 else None
    row_line = data_no
    if table is None:
        table, row_line = _slow_table(data_lines, data_no, ports, m, source)
    kind = opts["parameter"]
    if param is None:
        param = f"{kind}21" if ports == 2 else f"{kind}11"
    i, j, name = _param_index(param, ports, kind, source)
    col = (j * 2 + i) if ports == 2 else (i * ports + j)
    freq, v = _convert(table[:, 0], table[:, 1 + 2 * col], table[:, 2 + 2 * col], opts, name,
                       source, row_line)
    return TouchstoneData(freq_hz=freq, values=v, ports=ports, options=opts, param=name)


def _convert(f: np.ndarray, a: np.ndarray, b: np.ndarray, opts: dict, name: str, source: str,
             row_line: list[int]) -> tuple[np.ndarray, np.ndarray]:
    """Frequencies in Hz and complex values of one parameter, de-normalised.

    Every number in the file is finite, but scaling can still overflow (1e300
    GHz, 7000 dB, a Z value times a huge R, a Y value over a tiny R).  numpy
    would say so with a RuntimeWarning on the terminal and go on with inf;
    here the first such row is an InputError naming its line instead.
    """
    freq = freq_to_hz(f, opts["freq_unit"], source=source, lines=row_line)
    with np.errstate(over="ignore", invalid="ignore", divide="ignore", under="ignore"):
        rot = np.exp(1j * np.radians(b))
        fmt = opts["format"]
        if fmt == "RI":
            v = a + 1j * b
        elif fmt == "MA":
            v = a * rot
        else:
            mag = 10.0 ** (a / 20.0)
            bad = np.flatnonzero(~np.isfinite(mag))
            if bad.size:
                k = int(bad[0])
                raise InputError(f"{name} magnitude {a[k]:g} dB overflows; expected a value "
                                 "below about 6000 dB", source=source, line=row_line[k])
            v = mag * rot
        r = opts["r_ohm"]
        if opts["parameter"] == "Z":
            v, how = v * r, f"times R = {r:g} ohm"
        elif opts["parameter"] == "Y":
            v, how = v / r, f"divided by R = {r:g} ohm"
        else:
            how = ""
        bad = np.flatnonzero(~np.isfinite(v))
        if bad.size:
            k = int(bad[0])
            raise InputError(f"{name} value at {freq[k]:g} Hz {how + ' ' if how else ''}overflows "
                             "(too large to represent); check the option line's R and the data",
                             source=source, line=row_line[k])
    return freq, v
