"""The canonical text files benchfit writes: a sweep CSV and a trace CSV.

Sweep::

    # benchfit sweep v1
    # quantity: plant
    # meta: {"instrument": "..."}          (one JSON object on one line)
    # provenance: {...}                     (one JSON object on one line)
    freq_hz,re,im[,stddev][,weight][,coherence]
    1.000000000000e+01,...

Trace::

    # benchfit trace v1
    # meta: {...}
    time_s,<channel>,<channel>...

Numbers are written with 13 significant digits so a round trip is exact to
the precision any instrument has.  Files are written atomically.
"""

from __future__ import annotations

import io
import json
import os
from pathlib import Path

import numpy as np

from benchfit.data.quote import cut, quote, quote_list
from benchfit.data.response import FrequencyResponse
from benchfit.data.rows import marker_name, value_problem
from benchfit.data.trace import TimeTrace
from benchfit.errors import InputError
from benchfit.fileio import write_text_atomic
from benchfit.provenance import Provenance

SWEEP_MAGIC = "# benchfit sweep v1"
TRACE_MAGIC = "# benchfit trace v1"
_FMT = "%.12e"


def sweep_csv_text(resp: FrequencyResponse) -> str:
    """The canonical CSV text of ``resp``."""
    cols = ["freq_hz", "re", "im"]
    data = [resp.freq_hz, resp.response.real, resp.response.imag]
    for name in ("stddev", "weight", "coherence"):
        arr = getattr(resp, name)
        if arr is not None:
            cols.append(name)
            data.append(arr)
    buf = io.StringIO()
    buf.write(SWEEP_MAGIC + "\n")
    buf.write(f"# quantity: {resp.quantity}\n")
    buf.write("# meta: " + json.dumps(resp.meta, default=str) + "\n")
    buf.write("# provenance: " + json.dumps(resp.provenance.to_dict(), default=str) + "\n")
    buf.write(",".join(cols) + "\n")
    np.savetxt(buf, np.column_stack(data), delimiter=",", fmt=_FMT)
    return buf.getvalue()


def write_sweep_csv(resp: FrequencyResponse, path: str | os.PathLike) -> Path:
    """Write ``resp`` as canonical CSV at ``path`` (atomically)."""
    return write_text_atomic(path, sweep_csv_text(resp))


def trace_csv_text(trace: TimeTrace) -> str:
    """The canonical CSV text of ``trace``."""
    buf = io.StringIO()
    buf.write(TRACE_MAGIC + "\n")
    buf.write("# meta: " + json.dumps(trace.meta, default=str) + "\n")
    buf.write("# provenance: " + json.dumps(trace.provenance.to_dict(), default=str) + "\n")
    buf.write(",".join(["time_s", *trace.names]) + "\n")
    np.savetxt(buf, np.column_stack([trace.time_s, *trace.channels.values()]), delimiter=",", fmt=_FMT)
    return buf.getvalue()


def write_trace_csv(trace: TimeTrace, path: str | os.PathLike) -> Path:
    """Write ``trace`` as canonical CSV at ``path`` (atomically)."""
    return write_text_atomic(path, trace_csv_text(trace))


def _provenance(fields: dict, source: str) -> Provenance | None:
    """The provenance header line, if any; a damaged one names the file."""
    if not fields.get("provenance"):
        return None
    try:
        return Provenance.from_dict(fields["provenance"])
    except InputError as e:
        raise InputError(e.message, source=source) from None


#: Deepest nesting a meta or provenance line may have (benchfit writes a few levels; a
#: deeper one would only make later JSON writing and copying recurse without need).
MAX_DEPTH = 64


def _depth(obj: object) -> int:
    """Nesting depth of a JSON value, without recursion."""
    deepest, stack = 0, [(obj, 1)]
    while stack:
        o, d = stack.pop()
        deepest = max(deepest, d)
        if isinstance(o, dict):
            stack.extend((v, d + 1) for v in o.values())
        elif isinstance(o, list):
            stack.extend((v, d + 1) for v in o)
    return deepest


def _header(lines: list[str], source: str) -> tuple[dict, int]:
    """Parse the '# key: value' lines; return (fields, index of the column-name line)."""
    fields: dict[str, object] = {}
    i = 1
    while i < len(lines) and lines[i].startswith("#"):
        key, _, value = lines[i][1:].partition(":")
        key, value = key.strip(), value.strip()
        if key in ("meta", "provenance"):
            try:
                fields[key] = json.loads(value)
            except (json.JSONDecodeError, RecursionError, ValueError):
                # ValueError: an integer past Python's digit limit; RecursionError: nesting
                # deeper than the interpreter's stack (a damaged or hostile line)
                raise InputError(f"'# {key}:' is not one JSON object (or nests too deeply)",
                                 source=source, line=i + 1) from None
            if not isinstance(fields[key], dict):
                raise InputError(f"'# {key}:' is not one JSON object", source=source, line=i + 1)
            if _depth(fields[key]) > MAX_DEPTH:
                raise InputError(f"'# {key}:' nests deeper than {MAX_DEPTH} levels; expected the flat "
                                 "object benchfit writes", source=source, line=i + 1)
        else:
            fields[key] = value
        i += 1
    if i >= len(lines):
        raise InputError("no column-name line after the header", source=source)
    return fields, i


def _rows(lines: list[str], start: int, ncols: int, source: str) -> np.ndarray:
    rows = []
    for k in range(start, len(lines)):
        line = lines[k].strip()
        if not line:
            continue
        cells = line.split(",")
        if len(cells) != ncols:
            raise InputError(f"{len(cells)} cells, expected {ncols}", source=source, line=k + 1)
        try:
            values = [float(c) for c in cells]
        except ValueError:
            raise InputError(f"non-numeric cell in {quote(line)}", source=source, line=k + 1) from None
        for c, v in zip(cells, values, strict=True):
            if marker_name(v):  # an instrument's 9.91E37 written through by a capture
                raise InputError(value_problem(c, v), source=source, line=k + 1)
        rows.append(values)
    if not rows:
        raise InputError("no data rows", source=source)
    return np.asarray(rows, dtype=float)


def read_canonical_sweep(path: str | os.PathLike, text: str | None = None) -> FrequencyResponse:
    """Read a canonical sweep CSV written by :func:`write_sweep_csv`."""
    source = str(path)
    if text is None:
        text = Path(path).read_text(encoding="utf-8-sig")
    lines = text.splitlines()
    if not lines or lines[0].strip() != SWEEP_MAGIC:
        raise InputError(f"first line is not {SWEEP_MAGIC!r}", source=source, line=1)
    fields, hline = _header(lines, source)
    cols = [c.strip() for c in lines[hline].split(",")]
    if cols[:3] != ["freq_hz", "re", "im"]:
        raise InputError(f"columns {quote_list(cols)}; expected freq_hz,re,im first", source=source,
                         line=hline + 1)
    a = _rows(lines, hline + 1, len(cols), source)
    extra = {c: a[:, j] for j, c in enumerate(cols) if j >= 3}
    prov = _provenance(fields, source)
    read_prov = Provenance(step="read_sweep", sources=(source,), settings={"dialect": "benchfit-canonical"},
                           parents=(prov.to_dict(),) if prov else ())
    bad = ~np.isfinite(a[:, :3])
    if bad.any():
        i, j = np.argwhere(bad)[0]
        data_lines = [k + 1 for k in range(hline + 1, len(lines)) if lines[k].strip()]
        raise InputError(f"{cols[j]} value {a[i, j]:g} is not finite; expected a finite number",
                         source=source, line=data_lines[int(i)], column=cut(cols[j], 40))
    try:
        return FrequencyResponse(
            freq_hz=a[:, 0], response=a[:, 1] + 1j * a[:, 2],
            stddev=extra.get("stddev"), weight=extra.get("weight"), coherence=extra.get("coherence"),
            quantity=str(fields.get("quantity", "unknown")),
            meta=dict(fields.get("meta") or {}), provenance=read_prov,
        )
    except InputError as e:
        raise InputError(e.message, source=source) from None


def read_canonical_trace(path: str | os.PathLike, text: str | None = None) -> TimeTrace:
    """Read a canonical trace CSV written by :func:`write_trace_csv`."""
    source = str(path)
    if text is None:
        text = Path(path).read_text(encoding="utf-8-sig")
    lines = text.splitlines()
    if not lines or lines[0].strip() != TRACE_MAGIC:
        raise InputError(f"first line is not {TRACE_MAGIC!r}", source=source, line=1)
    fields, hline = _header(lines, source)
    cols = [c.strip() for c in lines[hline].split(",")]
    if cols[0] != "time_s" or len(cols) < 2:
        raise InputError(f"columns {quote_list(cols)}; expected time_s then channels", source=source,
                         line=hline + 1)
    a = _rows(lines, hline + 1, len(cols), source)
    prov = _provenance(fields, source)
    try:
        return TimeTrace(
            time_s=a[:, 0], channels={c: a[:, j + 1] for j, c in enumerate(cols[1:])},
            meta=dict(fields.get("meta") or {}),
            provenance=Provenance(step="read_trace", sources=(source,),
                                  settings={"dialect": "benchfit-canonical"},
                                  parents=(prov.to_dict(),) if prov else ()),
        )
    except InputError as e:
        raise InputError(e.message, source=source) from None
