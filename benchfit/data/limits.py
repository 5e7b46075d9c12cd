"""Size limits of the text readers, checked before a file is loaded.

The readers hold a file's text and one Python string per line while they
work out its layout, so their memory grows with the file (about 400 bytes per
line of a three-column sweep).  Above these limits a file is refused with a
clear message instead of exhausting the machine; the check itself streams the
file in 1 MiB pieces and holds nothing.  Both limits can be raised with the
environment variables ``BENCHFIT_MAX_LINES`` and ``BENCHFIT_MAX_MB``.

One line may be at most ``BENCHFIT_MAX_LINE_KB`` (64 KiB): a row of a sweep or
scope export is well under 1 KiB, and working out the layout of a single line
of millions of cells (a file with no line ends) costs time and memory far
beyond its size, so it is refused in the same streaming pass.
"""

from __future__ import annotations

import os

from benchfit.errors import InputError

#: Default most lines a text export may have (2 million: a 1 000 000-point sweep fits twice).
MAX_LINES = 2_000_000
#: Default most bytes a text export may have.
MAX_BYTES = 200 * 2**20
#: Default most bytes one line may have.
MAX_LINE_BYTES = 64 * 2**10
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
    """Refuse a text file above the byte, line or line-length limit, naming it and the way out.

    Missing files and folders pass through (the caller reports them).
    """
    max_bytes = _limit("BENCHFIT_MAX_MB", MAX_BYTES, 2**20)
    max_lines = _limit("BENCHFIT_MAX_LINES", MAX_LINES)
    max_line = _limit("BENCHFIT_MAX_LINE_KB", MAX_LINE_BYTES, 2**10)
    try:
        size = os.stat(path).st_size
    except OSError:
        return
    if size > max_bytes:
        raise InputError(f"file is {size / 2**20:.0f} MB; benchfit reads text exports up to "
                         f"{max_bytes / 2**20:.0f} MB and {max_lines:,} lines; decimate or shorten the "
                         "record on the instrument, or raise BENCHFIT_MAX_MB", source=source)
    if size <= max_lines and size <= max_line:  # too few bytes for too many or too long lines
        return
    lines = 0
    run = 0  # bytes of the line being read

    def too_long(line_no: int) -> InputError:
        return InputError(f"line longer than {max_line // 2**10} KiB (a file without line ends, or a "
                          "damaged one?); expected rows of an export, far shorter; raise "
                          "BENCHFIT_MAX_LINE_KB if this line is real", source=source, line=line_no)

    try:
        with open(path, "rb") as fh:
            while chunk := fh.read(_CHUNK):
                pieces = chunk.split(b"\n")
                if len(pieces) > 1:
                    if run + len(pieces[0]) > max_line:
                        raise too_long(lines + 1)
                    inner = list(map(len, pieces[1:-1]))
                    if inner and max(inner) > max_line:
                        raise too_long(lines + 2 + next(k for k, n in enumerate(inner) if n > max_line))
                    lines += len(pieces) - 1
                    run = 0
                run += len(pieces[-1])
                if run > max_line:
                    raise too_long(lines + 1)
                if lines > max_lines:
                    raise InputError(f"file has more than {max_lines:,} lines; benchfit reads text "
                                     f"exports up to {max_lines:,} lines; decimate or shorten the "
                                     "record on the instrument, or raise BENCHFIT_MAX_LINES",
                                     source=source)
    except OSError:
        return
