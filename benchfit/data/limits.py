"""Size limits of the text readers, checked before a file is loaded.

The readers hold a file's text and one Python string per line while they
work out its layout, so their memory grows with the file (about 400 bytes per
line of a three-column sweep).  Above these limits a file is refused with a
clear message instead of exhausting the machine; the check itself streams the
file in 1 MiB pieces and holds nothing.  Both limits can be raised with the
environment variables ``BENCHFIT_MAX_LINES`` and ``BENCHFIT_MAX_MB``.
"""

from __future__ import annotations

import os

from benchfit.errors import InputError

#: Default most lines a text export may have (2 million: a 1 000 000-point sweep fits twice).
MAX_LINES = 2_000_000
#: Default most bytes a text export may have.
MAX_BYTES = 200 * 2**20
_CHUNK = 2**20


def _limit(name: str, default: int, scale: int = 1) -> int:
    text = os.environ.get(name)
    if not text:
        return default
    try:
        value = int(float(text) * scale)
    except ValueError:
        raise InputError(f"{text!r} is not a number", source=name) from None
    if value <= 0:
        raise InputError(f"{text!r}; expected a positive number", source=name)
    return value


def check_text_size(path: str | os.PathLike, source: str) -> None:
    """Refuse a text file above the line or byte limit, naming both and the way out.

    Missing files and folders pass through (the caller reports them).
    """
    max_bytes = _limit("BENCHFIT_MAX_MB", MAX_BYTES, 2**20)
    max_lines = _limit("BENCHFIT_MAX_LINES", MAX_LINES)
    try:
        size = os.stat(path).st_size
    except OSError:
        return
    if size > max_bytes:
        raise InputError(f"file is {size / 2**20:.0f} MB; benchfit reads text exports up to "
                         f"{max_bytes / 2**20:.0f} MB and {max_lines:,} lines; decimate or shorten the "
                         "record on the instrument, or raise BENCHFIT_MAX_MB", source=source)
    if size <= max_lines:  # fewer bytes than the line limit: cannot have too many lines
        return
    lines = 0
    try:
        with open(path, "rb") as fh:
            while chunk := fh.read(_CHUNK):
                lines += chunk.count(b"\n")
                if lines > max_lines:
                    raise InputError(f"file has more than {max_lines:,} lines; benchfit reads text "
                                     f"exports up to {max_lines:,} lines; decimate or shorten the "
                                     "record on the instrument, or raise BENCHFIT_MAX_LINES",
                                     source=source)
    except OSError:
        return
