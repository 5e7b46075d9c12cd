"""Quoting file text in messages, cut to a readable length.

An error line quotes what it found (a cell, a header, a line), but a damaged
file can hold a 1 MB cell or a 20 000-column header.  These helpers keep the
start and the end of long text and say how long it was, so one error stays one
readable line.
"""

from __future__ import annotations

from collections.abc import Sequence

#: Longest quoted text, in characters, before it is cut.
LIMIT = 60


def cut(text: str, limit: int = LIMIT) -> str:
    """``text`` itself, cut in the middle when longer than ``limit`` characters."""
    text = str(text)
    if len(text) <= limit:
        return text
    half = max(limit // 2, 1)
    return f"{text[:half]}…{text[-half:]} ({len(text)} characters)"


def quote(text: str, limit: int = LIMIT) -> str:
    """``repr(text)``, cut in the middle when longer than ``limit`` characters.

    >>> quote("x" * 1000, 20)
    "'xxxxxxxxxx…xxxxxxxxxx' (1000 characters)"
    """
    text = str(text)
    if len(text) <= limit:
        return repr(text)
    half = max(limit // 2, 1)
    return f"{text[:half] + '…' + text[-half:]!r} ({len(text)} characters)"


def quote_list(items: Sequence[str], limit: int = 8) -> str:
    """A list of names for a message: the first ``limit`` (each cut), then how many more."""
    shown = [quote(x, 30) for x in items[:limit]]
    more = len(items) - len(shown)
    return "[" + ", ".join(shown) + (f", … {more} more" if more > 0 else "") + "]"
