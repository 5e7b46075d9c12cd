"""Test helper: write a known sweep as text in a chosen dialect (independent of the reader).

Returns the bytes and the values the printed digits stand for, so a test can
check that the reader recovers exactly what was printed.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

FREQ_SCALE = {"Hz": 1.0, "kHz": 1e3, "MHz": 1e6}

# name forms for (freq, first, second) by header style and data form
_NAMES = {
    "paren": {"freq": "Frequency ({u})", "db": "Gain (dB)", "lin": "Magnitude (V/V)",
              "deg": "Phase (deg)", "rad": "Phase (rad)", "re": "Re (V/V)", "im": "Im (V/V)"},
    "bracket": {"freq": "f [{u}]", "db": "mag [dB]", "lin": "mag [lin]", "deg": "phase [°]",
                "rad": "phase [rad]", "re": "real", "im": "imag"},
    "underscore": {"freq": "freq_{ul}", "db": "gain_db", "lin": "gain_lin", "deg": "phase_deg",
                   "rad": "phase_rad", "re": "h_re", "im": "h_im"},
}
_UNIT_ROW = {"db": ("Magnitude", "dB"), "lin": ("Magnitude", "V/V"), "deg": ("Phase", "deg"),
             "rad": ("Phase", "rad"), "re": ("Real", "-"), "im": ("Imag", "-")}
FORMS = {"db_deg": ("db", "deg"), "lin_deg": ("lin", "deg"), "db_rad": ("db", "rad"),
         "re_im": ("re", "im")}
COLUMN_WORDS = {"db_deg": "freq,db,deg", "lin_deg": "freq,lin,deg", "db_rad": "freq,db,rad",
                "re_im": "freq,re,im"}


@dataclass
class Written:
    data: bytes
    freq_hz: np.ndarray  # what the printed digits say, sorted ascending
    response: np.ndarray
    options: dict  # reader options the file needs (columns and freq_unit for headerless)


def _cell(x: float, fmt: str, decimal: str) -> str:
    s = fmt % x
    return s.replace(".", ",") if decimal == "," else s


def _parse(cell: str) -> float:
    return float(cell.replace(",", "."))


def write_dialect(freq_hz, response, *, sep=",", decimal=".", header="paren", freq_unit="Hz",
                  form="db_deg", comments=False, crlf=False, bom=False, descending=False,
                  metadata=False) -> Written:
    """Text of a sweep in one dialect.

    sep: ',', ';', '\\t', ' ' (one space) or '  ' (two spaces); header: 'paren',
    'bracket', 'underscore', 'unit_row' or 'none'.
    """
    assert not (sep == "," and decimal == ",")
    f = np.asarray(freq_hz, float)
    h = np.asarray(response, complex)
    first, second = FORMS[form]
    scale = FREQ_SCALE[freq_unit]
    rows = []
    for fi, hi in zip(f, h, strict=True):
        if first == "re":
            a, b = _cell(hi.real, "%.6e", decimal), _cell(hi.imag, "%.6e", decimal)
        else:
            a = _cell(20 * np.log10(abs(hi)), "%.4f", decimal) if first == "db" else \
                _cell(abs(hi), "%.6e", decimal)
            ang = np.angle(hi)
            b = _cell(np.degrees(ang), "%.3f", decimal) if second == "deg" else _cell(ang, "%.6f", decimal)
        rows.append([_cell(fi / scale, "%.9g", decimal), a, b])
    if descending:
        rows = rows[::-1]
    lines = []
    if metadata:
        lines += ["Sweep export", "Instrument: simulated analyzer", f"Points: {len(rows)}", ""]
    if comments:
        lines += ["# written by the dialect test helper", "! a second kind of comment"]
    if header in _NAMES:
        n = _NAMES[header]
        lines.append(sep.join([n["freq"].format(u=freq_unit, ul=freq_unit.lower()), n[first], n[second]]))
    elif header == "unit_row":
        lines.append(sep.join(["Frequency", _UNIT_ROW[first][0], _UNIT_ROW[second][0]]))
        lines.append(sep.join([freq_unit, _UNIT_ROW[first][1], _UNIT_ROW[second][1]]))
    lines += [sep.join(r) for r in rows]
    text = "\n".join(lines) + "\n"
    if crlf:
        text = text.replace("\n", "\r\n")
    data = (b"\xef\xbb\xbf" if bom else b"") + text.encode("utf-8")
    # what the digits say
    pf = np.array([_parse(r[0]) * scale for r in rows])
    pa = np.array([_parse(r[1]) for r in rows])
    pb = np.array([_parse(r[2]) for r in rows])
    if first == "re":
        ph = pa + 1j * pb
    else:
        mag = 10 ** (pa / 20) if first == "db" else pa
        ph = mag * np.exp(1j * (np.radians(pb) if second == "deg" else pb))
    idx = np.argsort(pf)
    opts = {} if header != "none" else {"columns": COLUMN_WORDS[form], "freq_unit": freq_unit}
    return Written(data=data, freq_hz=pf[idx], response=ph[idx], options=opts)


def sample_response(n: int = 41) -> tuple[np.ndarray, np.ndarray]:
    """A third-order response with delay whose phase wraps past -180°."""
    f = np.logspace(1, 6, n)
    s = 2j * np.pi * f
    w = 2 * np.pi * 2e3
    h = 30.0 * w ** 2 / (s ** 2 + 0.4 * w * s + w ** 2) / (1 + s / (2 * np.pi * 50e3)) * np.exp(-s * 1e-6)
    return f, h
