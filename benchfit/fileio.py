"""File helpers every layer uses: atomic writes, JSON with complex numbers.

Outputs are written to a temporary file in the same folder, fsync'd and
renamed over the target, so a crash leaves either the old file or the new
one, never half of one.  JSON is the only serialisation format (no pickle).
"""

from __future__ import annotations

import json
import math
import os
import stat
import tempfile
from collections.abc import Iterable, Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import TYPE_CHECKING, Any

from benchfit.errors import InputError

if TYPE_CHECKING:
    import numpy as np

# numpy is imported inside the functions that need it: the CLI parser imports this module and
# must start without numpy (DEVELOPERS.md, "Start-up").


def _read_umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


# Read once at import: os.umask is process-wide, so changing it later could race with threads.
_FILE_MODE = 0o666 & ~_read_umask()


_SPECIAL = ((stat.S_ISCHR, "a character device"), (stat.S_ISBLK, "a block device"),
            (stat.S_ISFIFO, "a named pipe"), (stat.S_ISSOCK, "a socket"))


def check_output_path(path: str | os.PathLike) -> Path:
    """The one check every writer makes before writing ``path``: a new name or a regular file.

    An existing folder, device (``/dev/full``, ``/dev/null``), named pipe or socket is refused:
    the atomic rename would replace it with a regular file (as root, a device node) or the
    append would write into it.  A symbolic link is judged by what it points to.

    Raises
    ------
    InputError
        Naming ``path`` and what it is.
    """
    path = Path(path)
    try:
        st = os.stat(path)
    except FileNotFoundError:
        return path
    except OSError as e:  # a path through a file, a folder we may not look into
        raise InputError(f"cannot write here: {e.strerror}", source=str(path)) from None
    if stat.S_ISDIR(st.st_mode):
        raise InputError("is a folder; expected the name of a file to write", source=str(path))
    if not stat.S_ISREG(st.st_mode):
        kind = next((name for test, name in _SPECIAL if test(st.st_mode)), "not a regular file")
        raise InputError(f"is {kind}, not a regular file; benchfit writes its outputs only to "
                         "regular files: choose a file name", source=str(path))
    return path


def _write_failed(path: Path, e: OSError, *, kept: str) -> InputError:
    # Disk full, quota, an I/O error: one line naming the file and what is left of it.
    return InputError(f"cannot write: {e.strerror or e}; {kept}", source=str(path))


def write_bytes_atomic(path: str | os.PathLike, data: bytes) -> Path:
    """Write ``data`` to ``path`` atomically (temp file, fsync, rename).

    Returns
    -------
    Path
        The path written.

    Raises
    ------
    InputError
        ``path`` is not a regular file (:func:`check_output_path`), its folder cannot be
        written, or writing failed (disk full); the old file is then unchanged.
    """
    path = check_output_path(path)
    folder = path.parent if str(path.parent) else Path(".")
    try:
        folder.mkdir(parents=True, exist_ok=True)
        fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=folder)
    except OSError as e:  # read-only folder, a file where a folder should be...
        raise InputError(f"cannot write here: {e.strerror}", source=str(path)) from None
    try:
        # mkstemp makes the file 0600; give it the mode an ordinary open() would.
        os.fchmod(fd, _FILE_MODE)
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException as e:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        if isinstance(e, OSError):
            kept = "the old file is unchanged" if path.exists() else "nothing was written"
            raise _write_failed(path, e, kept=kept) from None
        raise
    try:  # make the rename itself durable
        dfd = os.open(folder, os.O_RDONLY)
        try:
            os.fsync(dfd)
        finally:
            os.close(dfd)
    except OSError:
        pass
    return path


def write_text_atomic(path: str | os.PathLike, text: str) -> Path:
    """Write UTF-8 ``text`` to ``path`` atomically."""
    return write_bytes_atomic(path, text.encode("utf-8"))


def append_lines_durable(path: str | os.PathLike, lines: Iterable[str]) -> None:
    """Append lines to a file and fsync before returning (capture, batch rows).

    Raises
    ------
    InputError
        ``path`` is not a regular file, or writing failed (disk full).  The lines may then be
        partly on disk; whoever appends keeps its own record of what was acknowledged (the
        capture manifest, the batch table's complete rows).
    """
    path = check_output_path(path)
    try:
        with open(path, "a", encoding="utf-8", newline="\n") as fh:
            for line in lines:
                fh.write(line if line.endswith("\n") else line + "\n")
            fh.flush()
            os.fsync(fh.fileno())
    except OSError as e:
        raise _write_failed(path, e, kept="what was written before is kept") from None


def encode_complex(values: Any) -> list[list[float]]:
    """Complex array-like -> list of ``[re, im]`` pairs (the JSON form)."""
    import numpy as np

    arr = np.atleast_1d(np.asarray(values, dtype=complex))
    return [[float(v.real), float(v.imag)] for v in arr]


def decode_complex(pairs: Any, *, what: str = "value") -> np.ndarray:
    """List of ``[re, im]`` pairs (or plain reals) -> complex numpy array."""
    import numpy as np

    out = []
    for p in pairs or []:
        try:
            if isinstance(p, (int, float)) and not isinstance(p, bool):
                out.append(complex(p, 0.0))
                continue
            if isinstance(p, (list, tuple)) and len(p) == 2:
                out.append(complex(float(p[0]), float(p[1])))
                continue
        except (TypeError, ValueError, OverflowError):
            pass
        raise InputError(f"{what}: expected [re, im] pairs of numbers, found {str(p)[:60]!r}")
    return np.asarray(out, dtype=complex)


def _default(o: Any) -> Any:
    if type(o).__module__.partition(".")[0] == "numpy":  # only a caller that has numpy loaded can pass its objects
        return _numpy_default(o)
    if isinstance(o, complex):
        return [o.real, o.imag]
    if isinstance(o, Path):
        return str(o)
    if hasattr(o, "to_dict"):
        return o.to_dict()
    raise TypeError(f"not JSON serialisable: {type(o).__name__}")


def _numpy_default(o: Any) -> Any:
    import numpy as np

    if isinstance(o, np.ndarray):
        if np.iscomplexobj(o):
            return encode_complex(o)
        return o.tolist()
    if isinstance(o, (np.floating,)):
        return float(o)
    if isinstance(o, (np.integer,)):
        return int(o)
    if isinstance(o, (np.bool_,)):
        return bool(o)
    if isinstance(o, np.complexfloating):
        return [float(o.real), float(o.imag)]
    raise TypeError(f"not JSON serialisable: {type(o).__name__}")


def _clean_nonfinite(o: Any) -> Any:
    # JSON has no NaN/inf; write them as null / "inf" strings a reader can map back.
    if isinstance(o, float):
        if math.isnan(o):
            return None
        if math.isinf(o):
            return "inf" if o > 0 else "-inf"
        return o
    if isinstance(o, dict):
        return {k: _clean_nonfinite(v) for k, v in o.items()}
    if isinstance(o, (list, tuple)):
        return [_clean_nonfinite(v) for v in o]
    return o


def to_json_text(obj: Any, *, indent: int | None = 2) -> str:
    """Serialise ``obj`` (dicts, lists, numpy values, objects with ``to_dict``) to JSON."""
    plain = json.loads(json.dumps(obj, default=_default))
    return json.dumps(_clean_nonfinite(plain), indent=indent, allow_nan=False)


def write_json_atomic(path: str | os.PathLike, obj: Any) -> Path:
    """Write ``obj`` as JSON to ``path`` atomically."""
    return write_text_atomic(path, to_json_text(obj) + "\n")


def read_text(path: str | os.PathLike, *, expected: str = "a text file") -> str:
    """Read a UTF-8 text file (BOM allowed); a missing, folder or non-text file is an InputError.

    Parameters
    ----------
    path
        The file.
    expected
        What the file should be, for the message (e.g. "a JSON file").
    """
    try:
        return Path(path).read_text(encoding="utf-8-sig")
    except FileNotFoundError:
        raise InputError("file not found", source=str(path)) from None
    except IsADirectoryError:
        raise InputError(f"is a folder, expected {expected}", source=str(path)) from None
    except UnicodeDecodeError:
        raise InputError(f"not UTF-8 text; expected {expected}", source=str(path)) from None
    except OSError as e:
        raise InputError(f"cannot read: {e.strerror}", source=str(path)) from None


def read_json(path: str | os.PathLike) -> dict[str, Any]:
    """Read a JSON object from ``path``; bad files raise :class:`InputError`."""
    text = read_text(path, expected="a JSON file")
    try:
        obj = json.loads(text)
    except json.JSONDecodeError as e:
        raise InputError(f"not valid JSON ({e.msg})", source=str(path), line=e.lineno) from None
    except (ValueError, RecursionError) as e:  # a number of over 4300 digits, nesting too deep
        raise InputError(f"not valid JSON ({str(e)[:80]})", source=str(path)) from None
    if not isinstance(obj, dict):
        raise InputError("expected a JSON object at the top level", source=str(path))
    return obj


@contextmanager
def malformed_as_input_error(source: str | os.PathLike, what: str = "file") -> Iterator[None]:
    """Turn what a damaged JSON document makes ``from_dict`` raise into an InputError.

    A key missing, a list where a number belongs, a string where a list belongs
    all surface as KeyError / TypeError / ValueError / AttributeError / IndexError
    deep inside ``from_dict``; for a file the user gave, that is their input's
    fault, so it is reported as one :class:`InputError` naming the file.
    """
    try:
        yield
    except InputError as e:
        if e.source is None:
            raise InputError(e.message, source=str(source), line=e.line, column=e.column) from None
        raise
    except (KeyError, TypeError, ValueError, AttributeError, IndexError, OverflowError) as e:
        raise InputError(f"{what} is incomplete or malformed ({type(e).__name__}: {e}); "
                         "expected a file written by benchfit", source=str(source)) from None


def as_float(value: Any) -> float:
    """Inverse of the non-finite encoding in :func:`to_json_text`."""
    if value is None:
        return float("nan")
    if value == "inf":
        return float("inf")
    if value == "-inf":
        return float("-inf")
    return float(value)
