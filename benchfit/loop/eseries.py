"""Preferred-number series for resistors and capacitors (IEC 60063).

The tables are the standard's values for one decade, 1 <= v < 10, written out
literally.  They are *not* generated from the rounding formula
``round(10**(i/n), digits)``: the E6/E12/E24 rows keep historical values that
the formula does not give (E24: 2.7, 3.0, 3.3, 3.6, 3.9, 4.3, 4.7 and 8.2 where
the formula gives 2.6, 2.9, 3.2, 3.5, 3.8, 4.2, 4.6 and 8.3), and E192 has
9.20 where the formula gives 9.19.

E3..E24 have two significant figures, E48..E192 three.
"""

from __future__ import annotations

import numpy as np

from benchfit.errors import InputError

_E3 = (1.0, 2.2, 4.7)
_E6 = (1.0, 1.5, 2.2, 3.3, 4.7, 6.8)
_E12 = (1.0, 1.2, 1.5, 1.8, 2.2, 2.7, 3.3, 3.9, 4.7, 5.6, 6.8, 8.2)
_E24 = (1.0, 1.1, 1.2, 1.3, 1.5, 1.6, 1.8, 2.0, 2.2, 2.4, 2.7, 3.0,
        3.3, 3.6, 3.9, 4.3, 4.7, 5.1, 5.6, 6.2, 6.8, 7.5, 8.2, 9.1)
_E48 = (100, 105, 110, 115, 121, 127, 133, 140, 147, 154, 162, 169,
        178, 187, 196, 205, 215, 226, 237, 249, 261, 274, 287, 301,
        316, 332, 348, 365, 383, 402, 422, 442, 464, 487, 511, 536,
        562, 590, 619, 649, 681, 715, 750, 787, 825, 866, 909, 953)
_E96 = (100, 102, 105, 107, 110, 113, 115, 118, 121, 124, 127, 130,
        133, 137, 140, 143, 147, 150, 154, 158, 162, 165, 169, 174,
        178, 182, 187, 191, 196, 200, 205, 210, 215, 221, 226, 232,
        237, 243, 249, 255, 261, 267, 274, 280, 287, 294, 301, 309,
        316, 324, 332, 340, 348, 357, 365, 374, 383, 392, 402, 412,
        422, 432, 442, 453, 464, 475, 487, 499, 511, 523, 536, 549,
        562, 576, 590, 604, 619, 634, 649, 665, 681, 698, 715, 732,
        750, 768, 787, 806, 825, 845, 866, 887, 909, 931, 953, 976)
_E192 = (100, 101, 102, 104, 105, 106, 107, 109, 110, 111, 113, 114,
         115, 117, 118, 120, 121, 123, 124, 126, 127, 129, 130, 132,
         133, 135, 137, 138, 140, 142, 143, 145, 147, 149, 150, 152,
         154, 156, 158, 160, 162, 164, 165, 167, 169, 172, 174, 176,
         178, 180, 182, 184, 187, 189, 191, 193, 196, 198, 200, 203,
         205, 208, 210, 213, 215, 218, 221, 223, 226, 229, 232, 234,
         237, 240, 243, 246, 249, 252, 255, 258, 261, 264, 267, 271,
         274, 277, 280, 284, 287, 291, 294, 298, 301, 305, 309, 312,
         316, 320, 324, 328, 332, 336, 340, 344, 348, 352, 357, 361,
         365, 370, 374, 379, 383, 388, 392, 397, 402, 407, 412, 417,
         422, 427, 432, 437, 442, 448, 453, 459, 464, 470, 475, 481,
         487, 493, 499, 505, 511, 517, 523, 530, 536, 542, 549, 556,
         562, 569, 576, 583, 590, 597, 604, 612, 619, 626, 634, 642,
         649, 657, 665, 673, 681, 690, 698, 706, 715, 723, 732, 741,
         750, 759, 768, 777, 787, 796, 806, 816, 825, 835, 845, 856,
         866, 876, 887, 898, 909, 920, 931, 942, 953, 965, 976, 988)

_TABLES: dict[str, tuple[float, ...]] = {
    "E3": _E3, "E6": _E6, "E12": _E12, "E24": _E24,
    "E48": tuple(v / 100 for v in _E48),
    "E96": tuple(v / 100 for v in _E96),
    "E192": tuple(v / 100 for v in _E192),
}

# Tolerances associated with each series in IEC 60063 (E3: the standard only
# says "wider than 20 %"; 40 % is the figure commonly used, common practice, no source).
_TOLERANCE = {"E3": 0.40, "E6": 0.20, "E12": 0.10, "E24": 0.05,
              "E48": 0.02, "E96": 0.01, "E192": 0.005}

#: Series names, coarsest first.
SERIES = tuple(_TABLES)


def _key(name: str | int) -> str:
    text = str(name).strip().upper()
    if not text.startswith("E"):
        text = "E" + text
    if text not in _TABLES:
        raise InputError(f"unknown E-series {name!r}; expected one of {', '.join(SERIES)}",
                         source="--series")
    return text


def series_values(name: str | int) -> np.ndarray:
    """Values of one decade of an E-series, 1 <= v < 10, increasing.

    Parameters
    ----------
    name
        ``"E24"``, ``"e24"``, ``"24"`` or ``24``.

    Returns
    -------
    ndarray
        The preferred values (dimensionless mantissas).
    """
    return np.array(_TABLES[_key(name)], dtype=float)


def tolerance(name: str | int) -> float:
    """The part tolerance the series is made for, as a fraction (E24 -> 0.05)."""
    return _TOLERANCE[_key(name)]


def snap(values, name: str | int) -> np.ndarray:
    """The series value nearest to each value on a log scale (any decade).

    Nearest on a log scale means the smallest ratio error, so 1.45 snaps to
    1.5 in E6 (ratio 1.034) rather than to 1.0.  An exact tie picks the lower value.

    Parameters
    ----------
    values
        Positive finite numbers (ohm, F, ...), any shape.
    name
        The series.

    Returns
    -------
    ndarray
        Same shape as ``values``.

    Raises
    ------
    InputError
        When a value is zero, negative or not finite.
    """
    v = np.asarray(values, dtype=float)
    if not np.all(np.isfinite(v)) or np.any(v <= 0):
        raise InputError(f"cannot snap {v[~(np.isfinite(v) & (v > 0))].ravel()[:3].tolist()} "
                         "to an E-series; expected positive finite values")
    table = series_values(name)
    logs = np.log10(np.append(table, 10.0))   # 10 = next decade's first value
    lv = np.log10(v)
    decade = np.floor(lv)
    mant = lv - decade
    # floating point can put an exact power of ten just below it (mantissa 0.99999..)
    hi = np.clip(np.searchsorted(logs, mant, side="left"), 1, len(logs) - 1)
    lo = hi - 1
    pick = np.where(mant - logs[lo] <= logs[hi] - mant, lo, hi)
    out = np.append(table, 10.0)[pick] * 10.0 ** decade
    # round away the binary noise of 10**decade so 4.7e-9 prints as 4.7e-9
    return np.asarray(_round_sig(out, 4), dtype=float).reshape(v.shape)


def _round_sig(x: np.ndarray, digits: int) -> np.ndarray:
    x = np.asarray(x, dtype=float)
    exp = np.floor(np.log10(np.abs(x)))
    scale = 10.0 ** (digits - 1 - exp)
    return np.round(x * scale) / scale
