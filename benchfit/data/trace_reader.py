"""Read a scope export (time record of one or more channels) into a TimeTrace.

Uses the same dialect sniffing as the sweep reader.  Time comes from a time
column (unit from its name, a unit row, a 'horizontal units' line, or the
``time_unit`` override) or, when there is none, from a sample-interval (or
sample-rate) metadata line plus an optional start-time / trigger-point line.
Channel values are scaled to V or A from units in their names (mV, mA...).
"""

from __future__ import annotations

import os
import re
from dataclasses import replace
from pathlib import Path
from typing import Any

import numpy as np

from benchfit.data.canonical import SWEEP_MAGIC, TRACE_MAGIC, read_canonical_trace
from benchfit.data.dialect import Dialect, load_text, sniff
from benchfit.data.quote import cut, quote
from benchfit.data.rows import BadRow, apply_row_rule, bad_row, skipped_warning
from benchfit.data.table import Block, find_blocks, footer_warning
from benchfit.data.timing import (
    duplicate_rows,
    printed_step,
    rounding_explains_repeats,
    straight_line,
    time_axis_findings,
)
from benchfit.data.trace import TimeTrace
from benchfit.data.units import (
    SIGNAL_UNITS,
    find_time_unit,
    parse_quantity,
    rate_value_hz,
    time_factor,
    time_value_s,
)
from benchfit.errors import InputError
from benchfit.provenance import Provenance

_TIME_NAME = re.compile(r"^(time|t|x|sec|secs|second|seconds|s|zeit|temps|tiempo)$")
_UNIT_IN_NAME = re.compile(r"[\(\[]\s*([^\)\]]*?)\s*[\)\]]")
_KEYS = {
    "interval": ("sampleinterval", "samplinginterval", "sampleperiod", "samplingperiod", "xincrement",
                 "increment", "dt", "deltat", "timeperpoint", "timestep", "timeresolution"),
    "rate": ("samplerate", "samplingrate", "samplingfrequency", "fs", "srate"),
    "start": ("starttime", "xstart", "t0", "timeoffset", "xorigin", "xoffset", "horizontaloffset",
              "firsttime", "start"),
    "trigger": ("triggerpoint", "triggerindex", "triggersample", "pretriggersamples"),
    "time_unit": ("horizontalunits", "horizontalunit", "timeunits", "timeunit", "xunits", "xunit"),
}


def _split_name(name: str) -> tuple[str, str | None]:
    """'CH2 (mV)' -> ('CH2', 'mV'); 'Vout_mV' -> ('Vout', 'mV'); 'CH1' -> ('CH1', None)."""
    m = _UNIT_IN_NAME.search(name)
    if m:
        return (name[:m.start()] + name[m.end():]).strip() or name.strip(), m.group(1)
    m = re.match(r"^(.*?)[\s_/]+([A-Za-zµμ]{1,3})$", name.strip())
    if m and (m.group(2).lower() in SIGNAL_UNITS or m.group(2).lower() in ("s", "ms", "us", "µs", "ns")):
        return m.group(1).strip(), m.group(2)
    return name.strip(), None


def is_time_name(name: str) -> bool:
    base, unit = _split_name(name)
    b = base.strip().lower()
    return bool(_TIME_NAME.match(b)) or b.startswith("time") or (
        unit is not None and unit.lower() in ("s", "ms", "us", "µs", "μs", "ns") and b in ("", "x"))


def _metadata(notes: list[str], d: Dialect) -> dict[str, tuple[str, str]]:
    """Known timing keys found in the metadata lines -> (raw value, the line's text).

    A line is 'key<sep>value' with the table's separator, ':', '=', ',', tab or ';', or
    'key value'; the first split whose key is a known one counts.
    """
    known = {name: what for what, names in _KEYS.items() for name in names}
    seps = ((d.separator,) if d.separator != "whitespace" else ()) + (":", "=", ";", "\t", ",")
    out: dict[str, tuple[str, str]] = {}
    for note in notes:
        splits = [note.partition(sep)[::2] for sep in seps if sep in note]
        parts = note.rsplit(None, 1)
        if len(parts) == 2:
            splits.append((parts[0], parts[1]))
        for key, value in splits:
            # 'Sample interval (us): 0.2': the unit in brackets after the key goes with the value
            unit = _UNIT_IN_NAME.search(key)
            base = key[:unit.start()] + key[unit.end():] if unit else key
            what = known.get(re.sub(r"[^a-z0-9]", "", base.lower()))
            if what is None:
                continue
            split_at = r"[;\t,]" if d.decimal == "." else r"[;\t]"
            cells = [c.strip() for c in re.split(split_at, value) if c.strip()]
            if unit and what in ("interval", "start") and len(cells) == 1:
                cells.append(unit.group(1))
            if what not in out and cells:
                out[what] = (" ".join(cells), note)
            break
    return out


def _time_axis(block: Block, time_col: int | None, names: list[str], units: list[str] | None,
               meta_keys: dict, time_unit: str | None, sample_interval_s: float | None,
               source: str, warnings: list[str], time_cells: list[str]
               ) -> tuple[np.ndarray, dict[str, Any]]:
    n = block.data.shape[0]
    info: dict[str, Any] = {}
    if time_col is not None:
        unit = time_unit
        how = "option"
        if unit is None:
            unit = find_time_unit(_split_name(names[time_col])[1] or "") if names else None
            how = "column name"
        if unit is None and units:
            unit = find_time_unit(units[time_col])
            how = "unit row"
        if unit is None and "time_unit" in meta_keys:
            unit = find_time_unit(meta_keys["time_unit"][0])
            how = "metadata line"
        if unit is None:
            unit, how = "s", "assumed"
        factor = time_factor(unit, source="time unit")
        raw = block.data[:, time_col]
        with np.errstate(over="ignore", invalid="ignore"):
            t = raw * factor
        if not np.all(np.isfinite(t)):
            i = int(np.flatnonzero(~np.isfinite(t))[0])
            raise InputError(f"time {raw[i]:g} {unit} is too large to represent in s",
                             source=source, line=int(block.line_no[i]))
        info.update(time_source="time column", time_unit=unit, time_unit_from=how)
        return _check_time(t, block.line_no, printed_step(time_cells) * factor, source, warnings), info
    dt = sample_interval_s
    how = "option"
    if dt is None and "interval" in meta_keys:
        raw, line = meta_keys["interval"]
        dt = time_value_s(raw, default_unit=_interval_unit(raw, meta_keys, warnings))
        how = f"metadata: {cut(line, 80)}"
        if dt is None:
            raise InputError(f"sample interval {quote(raw)} is not a time; expected e.g. 2e-7 or "
                             "200 ns", source=source)
    if dt is None and "rate" in meta_keys:
        raw, line = meta_keys["rate"]
        rate = rate_value_hz(raw)
        if rate is None or not rate > 0:
            raise InputError(f"sample rate {quote(raw)} is not a rate; expected e.g. 5e6 or 5 MSa/s",
                             source=source)
        dt, how = 1.0 / rate, f"metadata: {cut(line, 80)}"
    if dt is None:
        raise InputError("no time column and no sample-interval line; give the interval "
                         "(--sample-interval) or name a column 'time'", source=source)
    if not dt > 0:
        raise InputError(f"sample interval {dt:g} s must be > 0", source=source)
    t0 = 0.0
    if "start" in meta_keys:
        v = time_value_s(meta_keys["start"][0])
        if v is not None:
            t0 = v
    elif "trigger" in meta_keys:
        try:
            t0 = -float(meta_keys["trigger"][0].split()[0].replace(",", ".")) * dt
        except ValueError:
            pass
    info.update(time_source="sample interval", sample_interval_from=how, t0_s=t0)
    with np.errstate(over="ignore", invalid="ignore"):
        t = t0 + dt * np.arange(n)
    if not np.all(np.isfinite(t)):
        raise InputError(f"sample interval {dt:g} s and start {t0:g} s give times beyond the "
                         "largest number; expected a sample interval in seconds", source=source)
    return t, info


#: A bare interval below this is in seconds even beside a 'horizontal units: us' line.
_SECONDS_BELOW = 1e-3


def _interval_unit(raw: str, meta_keys: dict, warnings: list[str]) -> str:
    """The unit of a sample-interval value written without one.

    Evidence weighed: a 'horizontal units' line (``us``) names the unit of the time
    axis, and an interval written as a plain number (``0.2``) is in that unit; but an
    export that states its interval in seconds writes it so (``1.0E-06`` beside
    ``Horizontal Units,us``), and reading that as microseconds would make a 1 µs
    interval 1 ps.  A plain value below :data:`_SECONDS_BELOW` is taken as seconds (an
    export that scales its numbers by a unit prefix keeps them at 0.001 or more; common
    practice, no source), with a warning naming the other reading.
    """
    q = parse_quantity(raw)
    if q is None or q[1] or "time_unit" not in meta_keys:
        return "s"
    unit = find_time_unit(meta_keys["time_unit"][0])
    if unit is None or time_factor(unit, source="time unit") == 1.0:
        return "s"
    if abs(q[0]) >= _SECONDS_BELOW:
        return unit
    warnings.append(f"sample interval {quote(raw)} has no unit of its own and is read in seconds "
                    f"({q[0]:g} s), not in the {unit} of the {quote(cut(meta_keys['time_unit'][1], 60))} "
                    "line; if it is in that unit, give sample_interval_s= (--sample-interval)")
    return "s"


def _check_time(t: np.ndarray, line_no: np.ndarray, resolution: float, source: str,
                warnings: list[str]) -> np.ndarray:
    """The time axis from a time column: repeats the digits explain are rebuilt evenly,
    other repeats and backward steps are errors; gaps, rate changes and jitter are warned."""
    steps = np.diff(t)
    if np.all(steps > 0):
        warnings.extend(time_axis_findings(t, line_no, resolution))
        return t
    if np.all(steps >= 0) and t[-1] > t[0] and rounding_explains_repeats(t, resolution):
        # Repeated times: the export printed too few digits for the sample interval.
        k = np.arange(t.size)
        slope, start = straight_line(t)
        warnings.append("time column repeats values (printed with too few digits); rebuilt an "
                        "evenly spaced time axis fitted to the printed times")
        return start + slope * k
    i = int(np.flatnonzero(steps <= 0)[0]) + 1
    what = "repeats" if steps[i - 1] == 0 else "does not increase from"
    raise InputError(f"time {t[i]:g} s {what} the row before ({t[i - 1]:g} s)"
                     + ("; the times are printed with digits to spare, so this is no rounding"
                        if steps[i - 1] == 0 else "") + "; expected increasing times",
                     source=source, line=int(line_no[i]))


def read_trace(path: str | os.PathLike, channel: str | int | None = None, *,
               columns: str | list[str] | None = None, time_unit: str | None = None,
               sample_interval_s: float | None = None, skip_bad_rows: bool = False) -> TimeTrace:
    """Read a scope export (CSV/TSV/whitespace, any decimal mark) or a canonical trace CSV.

    Parameters
    ----------
    path
        The file.
    channel
        Keep only this channel: its name (case-insensitive, units stripped, e.g. 'CH2')
        or 0-based index among the channels.  Default: all channels.
    columns
        Column names in order, e.g. ``"time,CH1,CH2"`` or ``"CH1"``; 'time' marks the time
        column and 'skip' drops one.  Needed only when the file has no header.
    time_unit
        Unit of the time column ('s', 'ms', 'us', 'ns'), overriding what the file says.
    sample_interval_s
        Sample interval in s when the file has no time column and no interval line.
    skip_bad_rows
        Leave out rows that cannot be read (text among the numbers, '#N/A', NaN, a SCPI
        9.91E37 marker, a row repeated exactly) instead of refusing the file; they are
        listed in ``meta["skipped_rows"]``, a warning and the provenance.

    Returns
    -------
    TimeTrace
        Time in s; channels in V (or A) by the unit in their names.  ``meta`` holds
        ``dialect``, ``units``, ``warnings``, ``notes`` and ``skipped_rows``.

    Raises
    ------
    InputError
        Bad file (with line numbers), a row that cannot be read (unless
        ``skip_bad_rows``), unknown channel, no way to know the time.
    """
    with np.errstate(all="ignore"):  # every value is checked; numpy's notes must not reach stderr
        return _read_trace(path, channel, columns=columns, time_unit=time_unit,
                           sample_interval_s=sample_interval_s, skip_bad_rows=skip_bad_rows)


def _read_trace(path, channel, *, columns, time_unit, sample_interval_s, skip_bad_rows) -> TimeTrace:
    source = str(path)
    settings = {k: v for k, v in dict(channel=channel, columns=columns, time_unit=time_unit,
                                      sample_interval_s=sample_interval_s,
                                      skip_bad_rows=skip_bad_rows or None).items() if v is not None}
    if time_unit is not None:
        time_factor(time_unit)
    text = load_text(path)
    first = text[:4096].lstrip().split("\n", 1)[0].strip()
    if first == TRACE_MAGIC:
        tr = read_canonical_trace(path, text=text)
        meta = {**tr.meta, "dialect": {"format": "benchfit canonical CSV"}}
        meta.setdefault("warnings", [])
        tr = TimeTrace(time_s=tr.time_s, channels=tr.channels, meta=meta,
                       provenance=Provenance(step="read_trace", sources=(source,), settings=settings,
                                             parents=tr.provenance.parents))
        return _pick(tr, channel) if channel is not None else tr
    if first == SWEEP_MAGIC:
        raise InputError("this is a benchfit sweep file (frequency response); read it with "
                         "read_sweep", source=source, line=1)
    lines = text.splitlines()
    d = sniff(lines, source, min_columns=1)
    blocks = find_blocks(lines, d, source)
    warnings: list[str] = []
    block = max(blocks, key=lambda b: b.rows_in_block)
    if len(blocks) > 1:
        first_line = int(block.line_no[0]) if block.line_no.size else block.bad_rows[0].line
        warnings.append(f"file holds {len(blocks)} blocks of rows; read the longest "
                        f"(from line {first_line})")
    ncols = block.data.shape[1]
    units = block.units
    if columns is not None:
        names = [c.strip() for c in (columns.split(",") if isinstance(columns, str) else columns)]
        if len(names) != ncols:
            raise InputError(f"{len(names)} names given but the rows have {ncols} columns",
                             source="--columns")
        header = "option"
    elif block.names is not None:
        names, header = list(block.names), "names" + (" and unit row" if units else "")
    else:
        names, header = [], "none"
    keep = [i for i, nm in enumerate(names) if nm.lower() not in ("skip", "-", "_")] if names else \
        list(range(ncols))
    time_col = next((i for i in keep if names and is_time_name(names[i])), None)
    if not names:
        first_col = block.data[:, 0]
        steps = np.diff(first_col)
        if ncols >= 2 and steps.size and np.all(steps > 0) and steps.max() <= 1.5 * steps.min():
            time_col = 0  # an evenly rising first column is the time
            warnings.append("no header: took column 1 as time"
                            + ("" if time_unit else " in seconds (give time_unit if not)"))
        names = ["time" if i == time_col else f"ch{i + 1 - (time_col is not None)}"
                 for i in range(ncols)]
    block, skipped = _row_rule(block, time_col, lines, skip_bad_rows, source, warnings)
    if block.footer:
        warnings.append(footer_warning(block))
    meta_keys = _metadata(block.notes, d)
    time_cells = []
    if time_col is not None:  # the time column as written, for its print step (a sample)
        for ln in block.line_no[:: max(1, block.line_no.size // 500)]:
            cells = d.split(lines[int(ln) - 1])
            if time_col < len(cells):
                time_cells.append(cells[time_col])
    t, tinfo = _time_axis(block, time_col, names, units, meta_keys, time_unit, sample_interval_s,
                          source, warnings, time_cells)
    channels: dict[str, np.ndarray] = {}
    ch_units: dict[str, str] = {}
    for i in keep:
        if i == time_col:
            continue
        base, unit = _split_name(names[i])
        if unit is None and units:
            unit = units[i].strip("[]() ") or None
        scale, si = SIGNAL_UNITS.get((unit or "v").lower(), (1.0, unit or "V"))
        name = base or f"ch{i + 1}"
        while name in channels:
            name += "_"
        channels[name] = block.data[:, i] * scale
        ch_units[name] = si if unit else "V (assumed)"
    if not channels:
        raise InputError("no channel columns besides time", source=source)
    meta = {
        "source": Path(source).name,
        "dialect": {"format": "table", **d.to_dict(), "header": header,
                    "header_line": block.header_line, "first_data_line": int(block.line_no[0]),
                    **tinfo},
        "units": ch_units,
        "warnings": warnings,
        "notes": [cut(x, 200) for x in (block.notes + block.footer)[:40]],
        "skipped_rows": [b.to_dict() for b in skipped],
    }
    if skipped:
        settings["skipped_rows"] = [b.line for b in skipped]
    try:
        tr = TimeTrace(time_s=t, channels=channels, meta=meta,
                       provenance=Provenance(step="read_trace", sources=(source,), settings=settings))
    except InputError as e:  # e.g. a single sample: name the file
        raise InputError(e.message, source=source) from None
    return _pick(tr, channel) if channel is not None else tr


def _row_rule(block: Block, time_col: int | None, lines: list[str], skip: bool, source: str,
              warnings: list[str]) -> tuple[Block, list[BadRow]]:
    """The block with its unreadable rows refused or (``skip``) left out, and those rows.

    With a time column, a row equal in every column to the row before is a duplicated
    export row (it would halve the apparent sample interval); it cannot be read either.
    """
    bad = list(block.bad_rows)
    if time_col is not None:
        for i in duplicate_rows(block.data):
            ln = int(block.line_no[i])
            bad.append(bad_row(ln, lines[ln - 1], f"row repeats line {int(block.line_no[i - 1])} "
                               "exactly (time and every channel); expected each sample once"))
    skipped = apply_row_rule(bad, skip, source)
    if skipped:
        keep = ~np.isin(block.line_no, [b.line for b in skipped])
        block = replace(block, data=block.data[keep], line_no=block.line_no[keep], bad_rows=[])
        warnings.append(skipped_warning(skipped))
    if block.data.shape[0] == 0:
        raise InputError("no row of the data could be read", source=source)
    return block, skipped


def _pick(tr: TimeTrace, channel: str | int) -> TimeTrace:
    """The trace with only ``channel`` (by name, case-insensitive, or 0-based index)."""
    values = tr.channel(channel)
    name = next(n for n, v in tr.channels.items() if v is values)
    return TimeTrace(time_s=tr.time_s, channels={name: values}, meta=tr.meta, provenance=tr.provenance)
