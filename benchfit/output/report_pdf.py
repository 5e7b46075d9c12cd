"""The job's report as PDF: a text page (or pages) with the summary, part list and margins,
then every picture.  The HTML form, and the writing of both, is :mod:`benchfit.output.report`.
"""

from __future__ import annotations

import io
from collections.abc import Sequence

from matplotlib.backends.backend_pdf import PdfPages
from matplotlib.figure import Figure

from benchfit.loop.networks import network_label
from benchfit.output.report_figures import ReportFigure
from benchfit.output.report_inputs import ReportInputs
from benchfit.output.style import new_figure, plot_style
from benchfit.output.summary import design_summary, summary_lines
from benchfit.safety import CAUTION as SAFETY_NOTE


def _text_page(title: str, lines: Sequence[str]) -> Figure:
    with plot_style():
        fig = new_figure(8.27, 11.69)   # A4 portrait, inches
        fig.text(0.06, 0.95, title, fontsize=14, fontweight="bold", va="top", wrap=True)
        fig.text(0.06, 0.90, "\n".join(lines), fontsize=9, va="top", family="monospace", wrap=True)
    return fig


def render_pdf(inputs: ReportInputs, figures: Sequence[ReportFigure]) -> bytes:
    """The report as PDF bytes: a text page with the summary, part list and margins, then every picture."""
    d = inputs.design
    s = design_summary(d)
    lines = [*summary_lines(s), "", d.report()]
    if inputs.fit is not None:
        lines += ["", inputs.fit.report()]
    if d.warnings:
        lines += ["", "Warnings:", *(f"- {w}" for w in d.warnings)]
    lines += ["", SAFETY_NOTE]
    wrapped: list[str] = []
    for line in "\n".join(lines).splitlines():
        while len(line) > 100:
            wrapped.append(line[:100])
            line = "    " + line[100:]
        wrapped.append(line)
    buf = io.BytesIO()
    with PdfPages(buf, metadata={"Title": inputs.title or f"benchfit {network_label(d.kind)} design",
                                 "Creator": "benchfit"}) as pdf:
        for i in range(0, max(len(wrapped), 1), 90):
            pdf.savefig(_text_page("Loop design report" + (" (continued)" if i else ""), wrapped[i:i + 90]))
        for f in figures:
            pdf.savefig(f.figure)
    return buf.getvalue()
