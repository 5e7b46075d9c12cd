"""The one rule for rows: every row of a data block is read, or it is named.

A reader either

* reads every row of the data block, or
* raises an :class:`~benchfit.errors.InputError` naming the first row that could
  not be read (file, line, what was found and what was expected), or
* when asked (``skip_bad_rows=True``, ``--skip-bad-rows``), leaves such rows out,
  counts them and lists them in ``meta["skipped_rows"]``, the warnings and the
  result's provenance.

A row cannot be read when it is a line of text among the numbers (``Marker 1:
5 kHz``), has a cell that is not a number (``#N/A``), has the wrong number of
cells, holds a value that is not finite or is an instrument's not-a-number or
overflow marker, or (for a sweep) a frequency that is not positive.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from benchfit.data.quote import cut, quote
from benchfit.errors import InputError

#: SCPI-1999 Vol. 1 (Syntax and Style), section 7.2.1 "Numeric values" (from memory): an
#: instrument sends 9.91E37 for not-a-number and 9.9E37 / -9.9E37 for plus / minus infinity
#: (an overload, an unmeasured point).  They are markers, never measured values.
SCPI_NAN = 9.91e37
SCPI_INF = 9.9e37

#: How many skipped rows a warning lists by line before it says "and N more".
_LIST = 10
SKIP_HINT = "--skip-bad-rows (skip_bad_rows=True) leaves such rows out"


@dataclass(frozen=True)
class BadRow:
    """A row of a data block that could not be read.

    Attributes
    ----------
    line
        1-based line in the file.
    text
        The line as written (cut to a readable length).
    reason
        What was found and what was expected.
    column
        Column name or 1-based index, when one cell is to blame.
    """

    line: int
    text: str
    reason: str
    column: str | int | None = None

    def error(self, source: str) -> InputError:
        """The InputError that names this row."""
        column = cut(self.column, 40) if isinstance(self.column, str) else self.column
        return InputError(f"{self.reason}; {SKIP_HINT}", source=source, line=self.line,
                          column=column)

    def to_dict(self) -> dict[str, Any]:
        return {"line": self.line, "text": self.text, "reason": self.reason,
                "column": self.column}


def bad_row(line: int, raw: str, reason: str, column: str | int | None = None) -> BadRow:
    """A :class:`BadRow` whose text is cut to a readable length."""
    return BadRow(line=int(line), text=cut(raw.strip(), 80), reason=reason, column=column)


def marker_name(value: float) -> str | None:
    """'not-a-number' / 'infinity' when ``value`` is a SCPI marker, else None."""
    a = abs(value)
    if a == SCPI_NAN:
        return "not-a-number"
    if a == SCPI_INF:
        return "infinity"
    return None


def is_marker(values: np.ndarray) -> np.ndarray:
    """Element-wise: True where a value is a SCPI not-a-number or infinity marker."""
    a = np.abs(np.asarray(values, dtype=float))
    return (a == SCPI_NAN) | (a == SCPI_INF)


def value_problem(text: str, value: float) -> str | None:
    """Why one parsed cell is not data (non-finite or a SCPI marker), or None when it is."""
    if not np.isfinite(value):
        return f"value {quote(text)} is not finite; expected a finite number"
    name = marker_name(value)
    if name:
        return (f"value {quote(text)} is the SCPI {name} marker, not a measured value; "
                "expected a finite number")
    return None


def apply_row_rule(bad: list[BadRow], skip: bool, source: str) -> list[BadRow]:
    """Raise for the first bad row, or (``skip``) return them sorted by line.

    Raises
    ------
    InputError
        Naming the first bad row, when ``bad`` is not empty and ``skip`` is False.
    """
    bad = sorted(bad, key=lambda b: b.line)
    if bad and not skip:
        raise bad[0].error(source)
    return bad


def skipped_warning(bad: list[BadRow]) -> str:
    """The warning line that lists skipped rows by line."""
    lines = ", ".join(str(b.line) for b in bad[:_LIST])
    more = f" and {len(bad) - _LIST} more" if len(bad) > _LIST else ""
    return (f"skipped {len(bad)} row{'s' if len(bad) != 1 else ''} that could not be read "
            f"(line{'s' if len(bad) != 1 else ''} {lines}{more}; first: {bad[0].reason}); "
            "listed under skipped_rows (inspect --json) and in the provenance")
