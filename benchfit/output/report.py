"""One self-contained HTML report of a job (and the same as PDF).

The HTML file needs nothing but itself: the pictures are PNG data URIs, the
style sheet is inline, there is no script and no external reference.  Every
string that came from a user or a file (names, settings, instrument
identity, warnings) goes through :func:`html.escape`.  The PDF form is
:mod:`benchfit.output.report_pdf` (:func:`render_pdf`, re-exported here).
"""

from __future__ import annotations

import base64
import html
import io
import json
import math
import os
from collections.abc import Iterable, Sequence
from pathlib import Path
from typing import Any

from matplotlib.figure import Figure

from benchfit import __version__
from benchfit.fileio import to_json_text, write_bytes_atomic, write_text_atomic
from benchfit.fitting.parameters import parameter_label
from benchfit.loop.networks import network_label
from benchfit.numfmt import FIT_DIGITS, db, deg, eng, pct, quantity, sig, unit_symbol
from benchfit.output.report_figures import ReportFigure, report_figures
from benchfit.output.report_inputs import ReportInputs
from benchfit.output.report_pdf import render_pdf
from benchfit.output.summary import design_summary, rate_of_closure_text, summary_lines
from benchfit.safety import CAUTION

__all__ = ["SAFETY_NOTE", "default_report_path", "render_html", "render_pdf", "write_report"]

#: The short caution every report ends with (the full text: README.md "Safety", docs/capture.md).
SAFETY_NOTE = CAUTION

_CSS = """
body{font-family:system-ui,-apple-system,"Segoe UI",Roboto,"DejaVu Sans",sans-serif;color:#1a1a1a;
 margin:0;background:#fafafa;line-height:1.45}
main{max-width:1080px;margin:0 auto;padding:24px 32px 48px;background:#fff}
h1{font-size:1.6em;margin:.2em 0 .1em}h2{font-size:1.25em;margin:1.8em 0 .5em;padding-bottom:.2em;
 border-bottom:2px solid #0072B2}h3{font-size:1.05em;margin:1.2em 0 .4em}
.sub{color:#555;margin:0 0 1em}
table{border-collapse:collapse;margin:.4em 0 1em;font-size:.95em}
th,td{border:1px solid #ccc;padding:3px 10px;text-align:left;vertical-align:top}
th{background:#eef3f8;font-weight:600}td.num{text-align:right;font-variant-numeric:tabular-nums}
.quote{border:2px solid #0072B2;border-radius:6px;padding:10px 16px;background:#f4f8fb;margin:1em 0}
.quote li{margin:.15em 0}.bad{color:#D55E00;font-weight:600}.good{color:#009E73;font-weight:600}
figure{margin:1.2em 0}figure img{max-width:100%;height:auto;border:1px solid #ddd}
figcaption{font-size:.9em;color:#444;margin-top:.3em}
pre{background:#f4f4f4;padding:8px 12px;overflow-x:auto;font-size:.85em;border:1px solid #e0e0e0}
.warn li{color:#8a3b00}footer{color:#777;font-size:.85em;margin-top:2em}
"""


def esc(value: Any) -> str:
    """HTML-escaped text of any value (quotes too, so it is safe in attributes)."""
    return html.escape(str(value), quote=True)


def _num(v: Any, unit: str = "", digits: int = 3) -> str:
    """A value in a table cell, written by the one formatter (:mod:`benchfit.numfmt`)."""
    try:
        float(v)
    except (TypeError, ValueError):
        return esc(v)
    return esc(quantity(v, unit, digits))


def _table(head: Sequence[str], rows: Iterable[Sequence[Any]], numeric: Sequence[int] = ()) -> str:
    out = ["<table><thead><tr>", *(f"<th>{esc(h)}</th>" for h in head), "</tr></thead><tbody>"]
    for r in rows:
        out.append("<tr>" + "".join(
            f'<td class="num">{c}</td>' if i in numeric else f"<td>{c}</td>" for i, c in enumerate(r)) + "</tr>")
    out.append("</tbody></table>")
    return "".join(out)


def figure_png(fig: Figure, dpi: int = 110) -> bytes:
    """PNG bytes of a figure (Agg)."""
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=dpi)
    return buf.getvalue()


def _img(fig: ReportFigure) -> str:
    data = base64.b64encode(figure_png(fig.figure)).decode("ascii")
    return (f'<figure id="fig-{esc(fig.key)}"><img alt="{esc(fig.key)} plot" '
            f'src="data:image/png;base64,{data}"><figcaption>{esc(fig.caption)}</figcaption></figure>')


# ----- sections ----------------------------------------------------------------------------
def _instrument_lines(meta: dict[str, Any]) -> list[str]:
    """Instrument identity found in a file's metadata (reader notes, *IDN? answers)."""
    out = []
    for key in ("instrument", "idn", "identity", "model"):
        if meta.get(key):
            out.append(f"{key}: {meta[key]}")
    for note in meta.get("notes", []) or []:
        low = str(note).lower()
        if any(w in low for w in ("instrument", "model", "idn", "analyzer", "scope")):
            out.append(str(note))
    return out


def _inputs(inputs: ReportInputs) -> str:
    d = inputs.design
    files: list[tuple[str, str]] = []
    for s in d.provenance.sources:
        files.append(("design input", s))
    for lp in d.corners:
        for s in lp.plant.provenance.sources:
            files.append((f"plant ({lp.name})", s))
    if inputs.sweep is not None:
        files += [("measured sweep", s) for s in inputs.sweep.provenance.sources]
    measured = _trace_measurements(inputs)
    if inputs.step_trace is not None:
        files += [("measured reference step", s) for s in inputs.step_trace.provenance.sources]
    if inputs.load_trace is not None:
        files += [("measured load step", s) for s in inputs.load_trace.provenance.sources]
    if inputs.zout is not None:
        files += [("output impedance", s) for s in inputs.zout.provenance.sources]
    roles: dict[str, list[str]] = {}
    for role, f in files:
        roles.setdefault(f, [])
        if role not in roles[f]:
            roles[f].append(role)
    parts = ["<h2>Inputs</h2>"]
    if roles:
        parts.append(_table(("file", "used as", "measured there"),
                            ((f"<code>{esc(f)}</code>", esc(", ".join(r)), esc(measured.get(f, "")))
                             for f, r in roles.items())))
    idn: list[tuple[str, str]] = []
    for label, obj in (("sweep", inputs.sweep), ("reference step", inputs.step_trace),
                       ("load step", inputs.load_trace), ("impedance", inputs.zout)):
        if obj is not None:
            idn += [(label, line) for line in _instrument_lines(obj.meta)]
    if idn:
        parts.append("<h3>Instrument identity</h3>")
        parts.append(_table(("from", "as recorded"), ((esc(a), esc(b)) for a, b in idn)))
    t = d.targets
    settings: list[tuple[str, str]] = [
        ("network", network_label(d.kind)), ("method", d.method),
        ("target crossover", eng(t.crossover_hz, "Hz") if t.crossover_hz else "automatic (highest that meets the margins)"),
        ("target phase margin", f"≥ {deg(t.phase_margin_deg)}"), ("target gain margin", f"≥ {db(t.gain_margin_db)}"),
        ("sensing", f"divider {eng(d.sensing.r_top, 'Ω')} / {eng(d.sensing.r_bottom, 'Ω')} (gain {sig(d.sensing.gain)})"
         if d.sensing.is_divider else f"gain {sig(d.sensing.gain)}"),
        ("op-amp", "ideal" if d.opamp is None else
         f"GBW {eng(d.opamp.gbw_hz, 'Hz')}, open-loop gain {db(d.opamp.dc_gain_db)}"
         + (f", second pole {eng(d.opamp.second_pole_hz, 'Hz')}" if d.opamp.second_pole_hz else "")),
        ("part series", f"R {d.series.get('resistor')}, C {d.series.get('capacitor')}"),
    ]
    ps = d.provenance.settings
    if "r_in" in ps:
        settings.append(("input resistor R1 (sets the impedance level)", eng(float(ps["r_in"]), "Ω")))
    for k, label in (("draws", "Monte Carlo draws"), ("seed", "random seed"), ("snapping", "part snapping")):
        if ps.get(k) is not None:
            settings.append((label, str(ps[k])))
    for k, v in (inputs.settings or {}).items():
        settings.append((str(k), str(v)))
    parts.append("<h3>Settings</h3>")
    parts.append(_table(("setting", "value"), ((esc(a), esc(b)) for a, b in settings)))
    return "".join(parts)


def _fit(inputs: ReportInputs, figs: dict[str, list[ReportFigure]]) -> str:
    fit = inputs.fit
    if fit is None and not figs.get("fit"):
        return ""
    parts = ["<h2>Plant fit</h2>"]
    if fit is not None:
        rows = []
        for p in fit.parameters:
            rel = (f"{sig(abs(p.stderr / p.value) * 100, 2)} %" if p.value and math.isfinite(p.stderr) else "")
            unit = unit_symbol(p.unit or "")
            rows.append((esc(parameter_label(p.name)), _num(p.value, unit, FIT_DIGITS),
                         "fixed" if p.fixed else _num(p.stderr, unit, 2), esc(rel)))
        parts.append(_table(("parameter", "value", "± 1σ", "relative"), rows, numeric=(1, 2, 3)))
        parts.append(f"<details><summary>Full fit report</summary><pre>{esc(fit.report())}</pre></details>")
    parts += [_img(f) for f in figs.get("fit", [])]
    return "".join(parts)


def _design(inputs: ReportInputs, figs: dict[str, list[ReportFigure]]) -> str:
    d = inputs.design
    parts = [f"<h2>Design: {esc(network_label(d.kind))} network</h2>"]
    if d.synthesis is not None:
        s = d.synthesis
        parts.append(f"<p>Placed by the {esc(s.method)} method for a crossover of "
                     f"{esc(eng(s.crossover_hz, 'Hz'))}: plant phase there {esc(deg(s.plant_phase_deg))}, "
                     f"phase boost {esc(deg(s.boost_deg))}, K = {esc(sig(s.k))}.</p>")
    parts.append(f"<p>With the snapped parts: {esc(rate_of_closure_text(design_summary(d)))}, "
                 "the difference of the slopes of 1/beta and the plant gain where they cross.</p>")
    tol = {"resistor": d.spread.r_tol if d.spread else None, "capacitor": d.spread.c_tol if d.spread else None}
    rows = []
    for n, v in d.ideal.network.parts.items():
        kind = "resistor" if n.startswith("R") else "capacitor"
        unit = "Ω" if kind == "resistor" else "F"
        sv = d.snapped.network.parts[n]
        t = tol[kind]
        rows.append((esc(n), esc(eng(v, unit, 4)), f"<b>{esc(eng(sv, unit))}</b>",
                     esc(f"{(sv / v - 1) * 100:+.1f} %"),
                     esc(f"{d.series.get(kind)}" + (f", ±{sig(t * 100)} %" if t is not None else ""))))
    parts.append("<h3>Part list</h3>")
    parts.append(_table(("part", "ideal", "snapped (order this)", "change", "series, tolerance"), rows,
                        numeric=(1, 2, 3)))
    ch = d.snapped.network.corners_hz()
    z = ", ".join(eng(f, "Hz") for f in ch.get("zeros_hz", []))
    p = ", ".join(eng(f, "Hz") for f in ch.get("poles_hz", []))
    parts.append(f"<p>Compensator with snapped parts: zeros at {esc(z or 'none')}; poles at "
                 f"{esc(p or 'none')} (besides the integrator).</p>")
    parts += [_img(f) for f in figs.get("design", [])]
    return "".join(parts)


def _margins(inputs: ReportInputs, figs: dict[str, list[ReportFigure]]) -> str:
    d = inputs.design
    parts = ["<h2>Predicted margins</h2>"]
    rows = []
    for label, pred in (("ideal", d.ideal), ("snapped", d.snapped)):
        for lp, m in zip(d.corners, pred.corners, strict=False):
            stable = '<span class="good">stable</span>' if m.closed_loop_stable else '<span class="bad">UNSTABLE</span>'
            gm = (_num(m.gain_margin_db, "dB") if math.isfinite(m.gain_margin_db)
                  else esc("not defined (no phase crossing in the band)"))
            rows.append((esc(label), esc(lp.name), esc(eng(m.crossover_hz, "Hz")) if math.isfinite(m.crossover_hz)
                         else esc("no crossover"), _num(m.phase_margin_deg, "°"), gm,
                         _num(m.modulus_margin), _num(m.delay_margin_s, "s"), stable))
    parts.append(_table(("parts", "plant", "crossover", "phase margin", "gain margin", "modulus margin",
                         "delay margin", "closed loop"), rows, numeric=(2, 3, 4, 5, 6)))
    if d.spread is not None:
        sp = d.spread
        pc = sp.percentiles
        keys = sorted(pc["pm_deg"], key=lambda k: float(k[1:]))
        rows = []
        for key, label, unit in (("pm_deg", "phase margin", "°"), ("gm_db", "gain margin", "dB"),
                                 ("crossover_hz", "crossover", "Hz")):
            rows.append((esc(label), *(_num(pc[key][k], unit) for k in keys)))
        parts.append(f"<h3>Spread over {sp.draws} Monte Carlo draws</h3>")
        parts.append(f"<p>Parts drawn uniformly within R ±{sig(sp.r_tol * 100)} %, C ±{sig(sp.c_tol * 100)} %"
                     + (", plant parameters drawn from the fit's covariance" if sp.plant_uncertainty else "")
                     + f". <b>Yield {esc(pct(sp.yield_fraction))}</b> meet every target with a stable loop "
                     f"(unstable: {esc(pct(sp.unstable_fraction))}).</p>")
        parts.append(_table(("percentile", *(k.replace("p", "") + " %" for k in keys)), rows,
                            numeric=tuple(range(1, len(keys) + 1))))
    parts += [_img(f) for f in figs.get("margins", [])]
    return "".join(parts)


def _time(inputs: ReportInputs, figs: dict[str, list[ReportFigure]]) -> str:
    if not figs.get("time") and inputs.step is None and inputs.load_step is None:
        return ""
    parts = ["<h2>Time response and output impedance</h2>"]
    parts += [f"<p>{esc(n)}</p>" for n in inputs.notes]
    for step, what in ((inputs.step, "Measured reference step"), (inputs.load_step, "Measured load step")):
        rows = _step_rows(step) if step is not None else []
        if rows:
            src = ", ".join(step.provenance.sources) if hasattr(step, "provenance") else ""
            parts.append(f"<h3>{what}{(' (' + esc(src) + ')') if src else ''}</h3>")
            parts.append(_table(("quantity", "value"), rows, numeric=(1,)))
    parts += [_img(f) for f in figs.get("time", [])]
    return "".join(parts)


def _step_rows(step: Any) -> list[tuple[str, str]]:
    """Rows of a measured-step table from a StepResult (reference or load step) or a StepFit."""
    rows: list[tuple[str, str]] = []
    m = getattr(step, "measurement", None)
    if m is not None:
        load = hasattr(m, "deviation_v")
        attrs = ((("current_step_a", "load-current step", "A"), ("deviation_v", "peak deviation", "V"),
                  ("peak_impedance_ohm", "peak |ΔV|/|ΔI|", "Ω"), ("recovery_time_s", "recovery time", "s"),
                  ("ringing_freq_hz", "ringing frequency", "Hz")) if load else
                 (("step_v", "step at the output", "V"), ("overshoot_pct", "overshoot", "%"),
                  ("rise_time_s", "rise time 10–90 %", "s"), ("settling_time_s", "settling time", "s"),
                  ("ringing_freq_hz", "ringing frequency", "Hz")))
        for attr, label, unit in attrs:
            v = getattr(m, attr, None)
            if v is not None and math.isfinite(float(v)):
                rows.append((esc(label), _num(v, unit)))
    fits = getattr(step, "fits", None) or ((step,) if hasattr(step, "parameters") else ())
    for f in fits[:1]:
        for p in f.parameters:
            if p.name in ("zeta", "fn_hz"):
                label = "damping ratio ζ" if p.name == "zeta" else "natural frequency"
                val = f"{sig(p.value)} ± {sig(p.stderr, 2)}" if p.name == "zeta" else \
                    f"{eng(p.value, 'Hz')} ± {eng(p.stderr, 'Hz', 2)}"
                rows.append((esc(f"{label} ({f.model} fit)"), esc(val)))
    pm = getattr(step, "phase_margin", None)
    if pm is not None and math.isfinite(pm.phase_margin_deg):
        rows.append(("phase margin read from ζ (second-order loop)",
                     esc(f"{deg(pm.phase_margin_deg, 0)} ± {deg(pm.phase_margin_stderr_deg, 0)}")))
    return rows


def _trace_measurements(inputs: ReportInputs) -> dict[str, str]:
    """File -> a line of what was measured on it (each measured trace with its own figures)."""
    out: dict[str, str] = {}
    for obj, step, channel in ((inputs.step_trace, inputs.step, inputs.step_channel),
                               (inputs.load_trace, inputs.load_step, inputs.load_channel)):
        if obj is None or step is None:
            continue
        rows = _step_rows(step)
        m = getattr(step, "measurement", None)
        ch = getattr(m, "channel", None) or channel or "first channel"
        text = f"{ch}: " + "; ".join(f"{html.unescape(a)} {html.unescape(b)}" for a, b in rows)
        for src in obj.provenance.sources:
            out[src] = text
    return out


def _warnings(inputs: ReportInputs) -> str:
    d = inputs.design
    items = [("design", w) for w in d.warnings]
    if inputs.fit is not None:
        items += [("fit", w) for w in inputs.fit.warnings]
    for obj, label in ((inputs.sweep, "sweep"), (inputs.step_trace, "step trace")):
        if obj is not None:
            items += [(label, w) for w in (obj.meta.get("warnings") or [])]
    for step, label in ((inputs.step, "reference step"), (inputs.load_step, "load step")):
        if step is not None:
            items += [(label, w) for w in getattr(step, "warnings", ())]
    items = list(dict.fromkeys(items))
    body = ("<ul class=\"warn\">" + "".join(f"<li><b>{esc(a)}:</b> {esc(b)}</li>" for a, b in items) + "</ul>"
            if items else "<p>None.</p>")
    return "<h2>Warnings</h2>" + body


def render_html(inputs: ReportInputs, figures: Sequence[ReportFigure]) -> str:
    """The report as one HTML document (string)."""
    d = inputs.design
    by: dict[str, list[ReportFigure]] = {}
    for f in figures:
        by.setdefault(f.section, []).append(f)
    s = design_summary(d)
    src = ", ".join(dict.fromkeys([*d.provenance.sources, *d.corners[0].plant.provenance.sources])) or "in-memory plant"
    title = inputs.title or f"Loop design report: {network_label(d.kind)} network for {src}"
    ok = s["targets_met"] and s["closed_loop_stable"]
    verdict = ('<span class="good">targets met</span>' if ok else '<span class="bad">targets NOT met</span>')
    quote = "".join(f"<li>{esc(line)}</li>" for line in summary_lines(s))
    body = [
        f"<h1>{esc(title)}</h1>",
        f'<p class="sub">benchfit {esc(__version__)} · design made {esc(d.provenance.created)} · {verdict}</p>',
        f'<div class="quote"><b>Numbers to quote</b><ul>{quote}</ul></div>',
        _inputs(inputs), _fit(inputs, by), _design(inputs, by), _margins(inputs, by), _time(inputs, by),
        _warnings(inputs),
        "<h2>Provenance</h2><details><summary>What produced this design (JSON)</summary>"
        f"<pre>{esc(to_json_text(d.provenance.to_dict()))}</pre></details>",
        f"<footer>Written by benchfit {esc(__version__)}. Predictions come from the fitted model and "
        f"the part values above; check them on the bench.<br>{esc(SAFETY_NOTE)}</footer>",
    ]
    return ("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
            f"<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\"><title>{esc(title)}</title>"
            f"<style>{_CSS}</style></head><body><main>\n" + "\n".join(b for b in body if b)
            + "\n</main></body></html>\n")


def write_report(inputs: ReportInputs, path: str | os.PathLike, *, pdf_path: str | os.PathLike | None = None,
                 figures: Sequence[ReportFigure] | None = None) -> dict[str, Any]:
    """Build the pictures and write the HTML report (and the PDF) atomically.

    Returns
    -------
    dict
        ``html`` path, ``pdf`` path or None, ``figures`` (keys) and ``summary``.
    """
    figs = list(figures) if figures is not None else report_figures(inputs)
    out = write_text_atomic(path, render_html(inputs, figs))
    pdf = None
    if pdf_path is not None:
        pdf = write_bytes_atomic(pdf_path, render_pdf(inputs, figs))
    return {"html": str(out), "pdf": None if pdf is None else str(pdf), "figures": [f.key for f in figs],
            "summary": json.loads(to_json_text(design_summary(inputs.design)))}


def default_report_path(design_path: str | os.PathLike) -> Path:
    """report.html next to the design file."""
    p = Path(design_path)
    return p.with_name(p.stem + "_report.html") if p.stem != "design" else p.with_name("report.html")
