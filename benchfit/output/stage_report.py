"""One self-contained HTML page for an op-amp stage design (pictures embedded as PNG).

What it holds: the design's text (parts, DC closed-loop gain, exact margins
beside the rate of closure, notes, spread, warnings), the crossing picture,
the predicted small-signal step, load step and output impedance (measured
traces overlaid when given) and the prediction's figures.
"""

from __future__ import annotations

import base64
import html
import io
import os
from pathlib import Path
from typing import Any

from benchfit.fileio import write_text_atomic


def _png(fig) -> str:
    buf = io.BytesIO()
    fig.savefig(buf, format="png")
    return base64.b64encode(buf.getvalue()).decode("ascii")


def stage_report_html(design: Any, *, title: str | None = None, step_trace: Any = None,
                      step_channel: str | None = None, load_trace: Any = None,
                      load_channel: str | None = None, measured_closed: Any = None,
                      step_v: float = 0.01, load_step_a: float = 0.01) -> tuple[str, Any]:
    """(HTML text, the prediction) of a stage design."""
    from benchfit.output.plot_stage import (
        crossing_figure,
        stage_prediction,
        stage_prediction_figure,
    )

    pred = stage_prediction(design, step_v=step_v, load_step_a=load_step_a)
    figs = [("Where 1/β meets Aol", crossing_figure(design, measured_closed=measured_closed)),
            ("Predicted responses", stage_prediction_figure(pred, step_trace=step_trace,
                                                            step_channel=step_channel,
                                                            load_trace=load_trace,
                                                            load_channel=load_channel))]
    name = title or f"{design.stage} stage, {design.kind} network"
    body = [f"<h1>{html.escape(name)}</h1>",
            "<h2>Design</h2>", f"<pre>{html.escape(design.report())}</pre>",
            "<h2>Predictions</h2>", f"<pre>{html.escape(pred.report())}</pre>"]
    for caption, fig in figs:
        body.append(f"<h2>{html.escape(caption)}</h2>"
                    f"<img alt=\"{html.escape(caption)}\" src=\"data:image/png;base64,{_png(fig)}\">")
    page = ("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
            f"<title>{html.escape(name)}</title><style>body{{font-family:sans-serif;max-width:60em;"
            "margin:2em auto;padding:0 1em}pre{background:#f6f6f6;padding:1em;overflow-x:auto}"
            "img{max-width:100%}</style></head><body>\n" + "\n".join(body) + "\n</body></html>\n")
    return page, pred


def write_stage_report(design: Any, path: str | os.PathLike, **kwargs: Any) -> dict[str, str]:
    """Write the page atomically; returns ``{"html": path}``."""
    page, _ = stage_report_html(design, **kwargs)
    return {"html": str(write_text_atomic(Path(path), page)), "pdf": None}
