"""The project's one small error hierarchy.

Every error a user can cause (a bad file, a bad option, an instrument that
misbehaves, a fit that cannot be done) is a :class:`BenchfitError`.  The CLI
prints ``benchfit: error: <message>`` and exits with status 2 for these; any
other exception is a bug in benchfit.
"""

from __future__ import annotations


class BenchfitError(Exception):
    """Base of every error benchfit raises on purpose."""

    exit_code = 2


class InputError(BenchfitError, ValueError):
    """A user's file or option is not what was expected.

    Parameters
    ----------
    message
        What was found and what was expected.
    source
        File name or option name the problem is in.
    line
        1-based line number in ``source``, when there is one.
    column
        Column name or 1-based index, when there is one.
    """

    def __init__(
        self,
        message: str,
        *,
        source: str | None = None,
        line: int | None = None,
        column: str | int | None = None,
    ) -> None:
        self.message = message
        self.source = source
        self.line = line
        self.column = column
        super().__init__(self._format())

    def _format(self) -> str:
        where = []
        if self.source is not None:
            where.append(str(self.source))
        if self.line is not None:
            where.append(f"line {self.line}")
        if self.column is not None:
            where.append(f"column {self.column}")
        prefix = ", ".join(where)
        return f"{prefix}: {self.message}" if prefix else self.message


class FitError(BenchfitError, RuntimeError):
    """A model cannot be fitted to the data as asked (too few points, no band...)."""


class DesignError(BenchfitError, RuntimeError):
    """A compensation network cannot meet what was asked of it."""


class InstrumentError(BenchfitError, RuntimeError):
    """An instrument did not answer, answered wrongly, or reported an error.

    Parameters
    ----------
    message
        What happened.
    resource
        VISA resource name.
    command
        The SCPI command that caused it, when known.
    """

    def __init__(self, message: str, *, resource: str | None = None, command: str | None = None):
        self.resource = resource
        self.command = command
        parts = []
        if resource:
            parts.append(resource)
        if command:
            parts.append(f"after {command!r}")
        prefix = " ".join(parts)
        super().__init__(f"{prefix}: {message}" if prefix else message)
