"""Read a frequency sweep from whatever text an analyzer exported.

:func:`read_sweep` dispatches on content: benchfit's canonical CSV, Touchstone
v1, or a delimited text table in any dialect (see :mod:`benchfit.data.dialect`
for separator / decimal / header detection and :mod:`benchfit.data.columns`
for what the column names mean).  Everything detected can be overridden.

The result carries ``meta["dialect"]`` (what was detected and used) and
``meta["warnings"]`` (things the user should look at).
"""

from __future__ import annotations

import os
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any

import numpy as np

from benchfit.data.canonical import SWEEP_MAGIC, TRACE_MAGIC, read_canonical_sweep
from benchfit.data.columns import Column, TracePair, check_units, classify_all, pair_traces
from benchfit.data.declared import declared_quantity
from benchfit.data.dialect import load_text, sniff
from benchfit.data.phaseunit import decide_phase_unit
from benchfit.data.quote import cut, quote, quote_list
from benchfit.data.repeats import order_and_average
from benchfit.data.response import QUANTITIES, FrequencyResponse
from benchfit.data.rows import BadRow, apply_row_rule, bad_row, skipped_warning
from benchfit.data.table import Block, find_blocks, footer_warning
from benchfit.data.touchstone import looks_like_touchstone, ports_from_name, read_touchstone
from benchfit.data.units import freq_factor, freq_unit_name
from benchfit.errors import InputError
from benchfit.provenance import Provenance

_COLUMN_WORDS = {
    "freq": ("freq", "auto"), "f": ("freq", "auto"), "frequency": ("freq", "auto"),
    "mag": ("mag", "auto"), "gain": ("mag", "auto"), "db": ("mag", "db"), "mag_db": ("mag", "db"),
    "lin": ("mag", "linear"), "mag_lin": ("mag", "linear"), "linear": ("mag", "linear"),
    "phase": ("phase", "auto"), "deg": ("phase", "deg"), "phase_deg": ("phase", "deg"),
    "rad": ("phase", "rad"), "phase_rad": ("phase", "rad"),
    "re": ("re", "auto"), "real": ("re", "auto"), "im": ("im", "auto"), "imag": ("im", "auto"),
    "coherence": ("coherence", "auto"), "coh": ("coherence", "auto"),
    "stddev": ("stddev", "auto"), "weight": ("weight", "auto"),
    "skip": ("skip", "auto"), "-": ("skip", "auto"), "_": ("skip", "auto"),
}


def parse_columns(spec: str | list[str] | tuple[str, ...]) -> list[tuple[str, str]]:
    """'freq,mag,phase' -> [(role, form), ...]; see :data:`_COLUMN_WORDS` for the words."""
    words = spec.split(",") if isinstance(spec, str) else list(spec)
    out = []
    for w in words:
        key = w.strip().lower()
        if key not in _COLUMN_WORDS:
            raise InputError(f"{w.strip()!r} is not a column word; expected one of "
                             + ", ".join(sorted(_COLUMN_WORDS)), source="--columns")
        out.append(_COLUMN_WORDS[key])
    roles = [r for r, _ in out]
    if "freq" not in roles or not ({"mag", "phase"} <= set(roles) or {"re", "im"} <= set(roles)):
        raise InputError(f"{spec!r} needs a frequency column and mag+phase or re+im",
                         source="--columns")
    return out


def _columns_from_spec(spec: list[tuple[str, str]], ncols: int, source: str) -> list[Column]:
    if len(spec) > ncols:
        raise InputError(f"--columns names {len(spec)} columns but the rows have {ncols}",
                         source=source)
    return [Column(index=i, name=f"{role}" + (f" ({form})" if form != "auto" else ""), role=role,
                   form=form) for i, (role, form) in enumerate(spec)]


def _check_choice(value: str, allowed: tuple[str, ...], option: str) -> str:
    v = str(value).lower()
    if v not in allowed:
        raise InputError(f"{value!r}; expected one of {', '.join(allowed)}", source=option)
    return v


def _select_trace(traces: list[tuple[str, Block, TracePair]], trace: int | str | None,
                  source: str, warnings: list[str]) -> tuple[int, str, Block, TracePair]:
    labels = [t[0] for t in traces]
    if trace is None:
        if len(traces) > 1:
            warnings.append(f"file holds {len(traces)} traces ({'; '.join(labels)}); read trace 1 "
                            f"({labels[0]}); pick another by number or part of its name (trace=, --trace)")
        return (0, *traces[0])
    if isinstance(trace, int) or str(trace).strip().isdigit():
        k = int(trace)
        if not 1 <= k <= len(traces):
            raise InputError(f"trace {k} does not exist; the file holds {len(traces)}: "
                             + "; ".join(f"{i + 1}={lab}" for i, lab in enumerate(labels)),
                             source="--trace")
        return (k - 1, *traces[k - 1])
    want = str(trace).strip().lower()
    hits = [i for i, lab in enumerate(labels) if want == lab.lower()]
    if not hits:
        hits = [i for i, lab in enumerate(labels) if want in lab.lower()]
    if len(hits) != 1:
        raise InputError(f"{'no' if not hits else 'more than one'} trace matches {trace!r}; the file "
                         "holds " + "; ".join(f"{i + 1}={lab}" for i, lab in enumerate(labels)),
                         source="--trace")
    return (hits[0], *traces[hits[0]])


def _decide_mag(values: np.ndarray, col: Column, override: str, lines: np.ndarray, source: str,
                warnings: list[str]) -> str:
    form = override if override != "auto" else col.form
    if form == "auto":
        if np.any(values < 0):
            form = "db"
        else:
            form = "linear"
            warnings.append(f"magnitude column {quote(col.name)} states no unit and has no negative "
                            "value, so it was read as linear; use mag='db' (--mag-db) if it is dB")
    if form == "linear" and np.any(values < 0):
        i = int(np.flatnonzero(values < 0)[0])
        raise InputError(f"linear magnitude {values[i]:g} is negative; expected >= 0 (if the column "
                         "is in dB, use --mag-db)", source=source, line=int(lines[i]), column=cut(col.name, 40))
    if form == "db" and values.size >= 3 and np.all(values > 0) and values.max() > 100 * values.min():
        # A dB column holding only positive values spread over decades is more likely a linear
        # magnitude (common practice, no source); a warning only.
        warnings.append(f"magnitude column {quote(col.name)} is read as dB but looks linear (all values "
                        f"between {values.min():.3g} and {values.max():.3g}); use --mag-linear if so")
    return form


@dataclass
class _Table:
    """What the table path found: one trace's values and how they were read."""

    freq_hz: np.ndarray
    response: np.ndarray
    extras: dict[str, np.ndarray]  # coherence / stddev / weight columns
    line_no: np.ndarray  # file line of each point
    dialect: dict[str, Any]
    columns: list[Column]
    impedance: bool
    notes: list[str]
    skipped: list[BadRow]


def _table_sweep(text: str, source: str, *, columns, trace, freq_unit, mag, phase, skip_bad_rows,
                 warnings: list[str]) -> _Table:
    lines = text.splitlines()
    d = sniff(lines, source)
    blocks = find_blocks(lines, d, source)
    spec = parse_columns(columns) if columns is not None else None
    traces: list[tuple[str, Block, TracePair]] = []
    problems: list[str] = []
    unread: list[Block] = []
    for bi, blk in enumerate(blocks):
        ncols = blk.data.shape[1]
        if spec is not None:
            cols = _columns_from_spec(spec, ncols, source)
        elif blk.names is not None:
            cols = classify_all(blk.names, blk.units)
        else:
            first = int(blk.line_no[0]) if blk.line_no.size else blk.bad_rows[0].line
            problems.append(f"no header line above the numbers at line {first}"
                            + (f" (the line above, {quote(blk.header_text)}, does not have {ncols} "
                               "names)" if blk.header_text else ""))
            unread.append(blk)
            continue
        pairs, pair_warn = pair_traces(cols)
        if not pairs:
            problems.append(f"the names {quote_list([c.name for c in cols])} (line {blk.header_line}) "
                            "give no frequency column with a magnitude/phase or real/imaginary pair")
            unread.append(blk)
            continue
        if spec is None:
            warnings.extend(pair_warn)
        for p in pairs:
            parts = [x for x in ((blk.title or "") if len(blocks) > 1 else "",
                                 p.label if len(pairs) > 1 else "") if x]
            label = " ".join(parts) or f"trace {len(traces) + 1}"
            if len(blocks) > 1 and not parts:
                label = f"block {bi + 1}"
            traces.append((label, blk, p))
    if not traces:
        raise InputError(problems[0] + "; give the columns, e.g. columns='freq,mag,phase' "
                         "(--columns freq,mag,phase)", source=source)
    for blk in unread:
        lo = int(blk.line_no[0]) if blk.line_no.size else blk.bad_rows[0].line
        hi = int(blk.line_no[-1]) if blk.line_no.size else blk.bad_rows[-1].line
        warnings.append(f"the {blk.rows_in_block} rows at lines {lo}-{hi} were not read (no names "
                        "line of their own: a table of another kind?)")
    k, label, blk, pair = _select_trace(traces, trace, source, warnings)
    if blk.footer:
        warnings.append(footer_warning(blk))
    check_units(pair, freq_unit, phase, source, blk.header_line)
    data, lines_no = blk.data, blk.line_no
    f_unit = freq_unit_name(freq_unit or pair.freq.unit or "Hz", exact_case=freq_unit is None)
    raw_f = data[:, pair.freq.index]
    with np.errstate(over="ignore", invalid="ignore"):
        f = raw_f * freq_factor(f_unit)
    bad: list[BadRow] = list(blk.bad_rows)
    fcol = pair.freq.name
    for i in np.flatnonzero(~np.isfinite(f) | (f <= 0)):
        why = (f"frequency {raw_f[i]:g} {f_unit} is too large to represent in Hz; check the "
               "frequency unit" if not np.isfinite(f[i]) else
               f"frequency {raw_f[i]:g} {f_unit} is not positive; expected frequencies > 0")
        bad.append(bad_row(int(lines_no[i]), lines[int(lines_no[i]) - 1], why, fcol))
    a, b = data[:, pair.first.index], data[:, pair.second.index]
    if pair.kind == "mag_phase":
        mag_form = _decide_mag(a, pair.first, mag, lines_no, source, warnings)
        with np.errstate(divide="ignore", invalid="ignore"):
            a_db = a if mag_form == "db" else 20 * np.log10(a)
        ph_form = decide_phase_unit(b, pair.second, phase, warnings, freq_hz=f, mag_db=a_db)
        with np.errstate(over="ignore", invalid="ignore"):
            m = 10.0 ** (a / 20.0) if mag_form == "db" else a
            h = m * np.exp(1j * (b if ph_form == "rad" else np.radians(b)))
        for i in np.flatnonzero(~np.isfinite(h)):
            bad.append(bad_row(int(lines_no[i]), lines[int(lines_no[i]) - 1],
                               f"magnitude {a[i]:g} dB overflows; expected a value below about "
                               "6000 dB (is the column linear?)", pair.first.name))
    else:
        mag_form = ph_form = None
        h = a + 1j * b
    skipped = apply_row_rule(bad, skip_bad_rows, source)
    if skipped:
        drop = np.isin(lines_no, [x.line for x in skipped])
        keep = ~drop
        f, h, lines_no = f[keep], h[keep], lines_no[keep]
        data = data[keep]
        warnings.append(skipped_warning(skipped))
    if not lines_no.size:
        raise InputError("no row of the data could be read", source=source)
    extras = {c.role: data[:, c.index] for c in pair.extras}
    dialect = {
        "format": "table",
        **d.to_dict(),
        **({"thousands": d.thousands} if blk.grouped else {}),
        "header": "names and unit row" if blk.units else ("names" if blk.names else "none"),
        "header_line": blk.header_line,
        "first_data_line": int(lines_no[0]),
        "freq_unit": f_unit + ("" if (freq_unit or pair.freq.unit) else " (assumed)"),
        "data_form": pair.kind,
        "mag_form": mag_form,
        "phase_form": ph_form,
        "columns": [c.name for c in pair.columns()],
        "trace": k + 1,
        "trace_label": label,
        "traces": [t[0] for t in traces],
        "rows_read": int(lines_no.size),
        "rows_skipped": len(skipped),
    }
    return _Table(freq_hz=f, response=h, extras=extras, line_no=lines_no, dialect=dialect,
                  columns=pair.columns(), impedance=any(c.impedance for c in (pair.first, pair.second)),
                  notes=blk.notes + blk.footer, skipped=skipped)


def read_sweep(path: str | os.PathLike, *, columns: str | list[str] | None = None,
               trace: int | str | None = None, freq_unit: str | None = None,
               mag: str = "auto", phase: str = "auto", param: str | None = None,
               quantity: str | None = None, skip_bad_rows: bool = False) -> FrequencyResponse:
    """Read a frequency sweep from a text export, a Touchstone file or a canonical CSV.

    Parameters
    ----------
    path
        The file.  Its content decides how it is read, not its name (except
        that '.sNp' names a Touchstone file's port count).
    columns
        Column meanings in order, e.g. ``"freq,mag,phase"``, ``"freq,db,deg"``,
        ``"freq,re,im"``, ``"skip,freq,db,rad"``; needed for a file with no header,
        and overrides the header when given.
    trace
        Which trace when the file holds several: 1-based number or (part of) its name.
    freq_unit
        'Hz', 'kHz', 'MHz' or 'GHz' for the frequency column (default: from the header, else Hz).
    mag
        'auto', 'db' or 'linear'.
    phase
        'auto', 'deg' or 'rad'.
    param
        Touchstone parameter ('S21', 'S11', 'Z11'...); default S21 for a two-port, S11
        for a one-port.
    quantity
        What was measured, one of :data:`benchfit.data.QUANTITIES` (default: 'impedance'
        when the columns say ohms, else what a keyed header line declares
        (:func:`benchfit.data.declared.declared_quantity`, kept in
        ``meta["declared_quantity"]``), else 'unknown').
    skip_bad_rows
        Leave out the rows of a text table that cannot be read (text among the numbers,
        '#N/A', NaN, a SCPI 9.91E37 marker, a non-positive frequency) instead of
        refusing the file; they are counted and listed in ``meta["skipped_rows"]``, a
        warning and the provenance (see :mod:`benchfit.data.rows`).

    Returns
    -------
    FrequencyResponse
        Sorted by frequency; ``meta`` holds ``dialect``, ``warnings``, ``columns``,
        ``notes`` (metadata lines found above the data) and ``skipped_rows``.

    Raises
    ------
    InputError
        Naming file, line and column: empty file, no numeric rows, a row that cannot
        be read (unless ``skip_bad_rows``), a unit that is not understood, a single
        point, unknown Touchstone option, unknown override value.
    """
    with np.errstate(all="ignore"):  # every value is checked; numpy's notes must not reach stderr
        return _read_sweep(path, columns=columns, trace=trace, freq_unit=freq_unit, mag=mag,
                           phase=phase, param=param, quantity=quantity, skip_bad_rows=skip_bad_rows)


def _read_sweep(path, *, columns, trace, freq_unit, mag, phase, param, quantity,
                skip_bad_rows) -> FrequencyResponse:
    source = str(path)
    mag = _check_choice(mag, ("auto", "db", "linear"), "--mag")
    phase = _check_choice(phase, ("auto", "deg", "rad"), "--phase")
    if freq_unit is not None:
        freq_factor(freq_unit, exact_case=False)  # validates early
    if quantity is not None and quantity not in QUANTITIES:
        raise InputError(f"{quantity!r}; expected one of {', '.join(QUANTITIES)}", source="--quantity")
    settings = {k: v for k, v in dict(columns=columns, trace=trace, freq_unit=freq_unit, mag=mag,
                                      phase=phase, param=param, quantity=quantity,
                                      skip_bad_rows=skip_bad_rows or None).items()
                if v is not None and v != "auto"}
    text = load_text(path)
    first = text[:4096].lstrip().split("\n", 1)[0].strip()
    if first == SWEEP_MAGIC:
        resp = read_canonical_sweep(path, text=text)
        meta = dict(resp.meta)
        meta.setdefault("warnings", [])
        meta["dialect"] = {"format": "benchfit canonical CSV", "separator": "comma", "decimal": ".",
                           "header": "names", "freq_unit": "Hz", "data_form": "re_im"}
        meta["columns"] = [{"index": i, "name": n, "role": n if n != "freq_hz" else "freq",
                            "unit": "Hz" if i == 0 else None, "form": "auto"}
                           for i, n in enumerate(("freq_hz", "re", "im"))]
        return replace(resp, quantity=quantity or resp.quantity, meta=meta,
                       provenance=Provenance(step="read_sweep", sources=(source,), settings=settings,
                                             parents=resp.provenance.parents))
    if first == TRACE_MAGIC:
        raise InputError("this is a benchfit trace file (time series); read it with read_trace "
                         "or 'benchfit step'", source=source, line=1)

    warnings: list[str] = []
    notes: list[str] = []
    impedance = False
    skipped: list[BadRow] = []
    lines_no = None
    if looks_like_touchstone(path, text):
        ts = read_touchstone(text, source, param=param, ports=ports_from_name(path))
        f, h, extras = ts.freq_hz, ts.values, {}
        dialect = {"format": "touchstone v1", "ports": ts.ports, "parameter": ts.param,
                   "data_form": ts.options["format"], "freq_unit": ts.options["freq_unit"],
                   "r_ohm": ts.options["r_ohm"], "option_line": ts.options["line"]}
        cols = [{"index": 0, "name": "frequency", "role": "freq", "unit": ts.options["freq_unit"],
                 "form": "auto"}, {"index": None, "name": ts.param, "role": ts.param,
                                   "unit": None, "form": ts.options["format"]}]
        impedance = ts.param.startswith("Z")
        if any(v is not None for v in (columns, trace)):
            warnings.append("columns/trace do not apply to a Touchstone file; use param")
        if np.any(f <= 0):
            raise InputError(f"frequency {f[f <= 0][0]:g} Hz is not positive", source=source)
    else:
        if param is not None:
            warnings.append("param applies to Touchstone files only; ignored")
        tab = _table_sweep(text, source, columns=columns, trace=trace, freq_unit=freq_unit, mag=mag,
                           phase=phase, skip_bad_rows=skip_bad_rows, warnings=warnings)
        f, h, extras, dialect = tab.freq_hz, tab.response, tab.extras, tab.dialect
        impedance, notes, skipped, lines_no = tab.impedance, tab.notes, tab.skipped, tab.line_no
        cols = [c.to_dict() for c in tab.columns]
    if f.size < 2:
        raise InputError(f"only {f.size} data point; a sweep needs at least 2", source=source)
    f, h, extras, order = order_and_average(f, h, extras, lines_no, warnings)
    if f.size < 2:
        raise InputError("all rows have the same frequency; a sweep needs at least 2", source=source)
    dialect["order"] = order
    if not np.all(np.isfinite(h)):
        i = int(np.flatnonzero(~np.isfinite(h))[0])
        raise InputError(f"response at {f[i]:g} Hz overflows (magnitude too large to represent)",
                         source=source)
    declared = declared_quantity(notes)
    if quantity is None:
        # ohms in the columns, else the export's own "Measurement;..." line, else unknown
        quantity = "impedance" if impedance else (declared[0] if declared else "unknown")
    coherence = extras.get("coherence")
    meta = {
        "source": Path(source).name,
        "dialect": dialect,
        "columns": cols,
        "warnings": warnings,
        "notes": [cut(x, 200) for x in notes[:40]],
        "skipped_rows": [b.to_dict() for b in skipped],
    }
    if declared:
        meta["declared_quantity"] = {"quantity": declared[0], "line": cut(declared[1], 200)}
    if skipped:
        settings["skipped_rows"] = [b.line for b in skipped]
    try:
        return FrequencyResponse(
            freq_hz=f, response=h, stddev=extras.get("stddev"), weight=extras.get("weight"),
            coherence=coherence, quantity=quantity, meta=meta,
            provenance=Provenance(step="read_sweep", sources=(source,), settings=settings))
    except InputError as e:
        raise InputError(e.message, source=source) from None

