"""Put a label where it hides no data.

A label (a boxed note, or the text of an annotation) is tried at a few
candidate places; the one whose box covers the fewest drawn data samples
wins (:func:`covered_samples` is the evidence).  Ties keep the earlier
candidate, so callers list their preferred place first.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np
from matplotlib.axes import Axes
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.lines import Line2D
from matplotlib.text import Text
from matplotlib.transforms import Bbox

#: Samples added between drawn points, so a sparse line crossing a box is still counted.
_UPSAMPLE = 8


def _renderer(ax: Axes):
    """A renderer of the figure with its layout settled (drawn once per figure).

    Labels placed here are kept out of the layout (``in_layout=False``), so
    after the first draw they do not move the axes and need no new draw.
    Callers place labels after every axis label, title and legend is set.
    """
    fig = ax.figure
    if not isinstance(fig.canvas, FigureCanvasAgg):
        FigureCanvasAgg(fig)
    if not getattr(fig, "_benchfit_laid_out", False):
        fig.canvas.draw()      # settle the layout: boxes are measured where they will be drawn
        fig._benchfit_laid_out = True
    return fig.canvas.get_renderer()


def _data_points(ax: Axes, exclude: Sequence[Any] = ()) -> np.ndarray:
    """Display coordinates of every drawn data line of ``ax`` (densified), shape (n, 2)."""
    pts = []
    for line in ax.get_lines():
        if not isinstance(line, Line2D) or line in exclude or not line.get_visible():
            continue
        xy = np.column_stack([np.asarray(line.get_xdata(), dtype=float),
                              np.asarray(line.get_ydata(), dtype=float)])
        if xy.shape[0] == 0:
            continue
        trans = line.get_transform()
        # skip the axis-spanning lines (axhline/axvline, blended transforms): guides, not data
        if trans is not ax.transData:
            continue
        ok = np.all(np.isfinite(xy), axis=1)
        with np.errstate(all="ignore"):
            d = trans.transform(xy[ok])
        if d.shape[0] > 1:
            t = np.linspace(0.0, 1.0, _UPSAMPLE, endpoint=False)
            seg = d[:-1, None, :] + (d[1:, None, :] - d[:-1, None, :]) * t[None, :, None]
            d = np.vstack([seg.reshape(-1, 2), d[-1:]])
        pts.append(d[np.all(np.isfinite(d), axis=1)])
    return np.vstack(pts) if pts else np.empty((0, 2))


def covered_samples(ax: Axes, box: Bbox, points: np.ndarray | None = None) -> int:
    """How many drawn data samples of ``ax`` lie inside ``box`` (display coordinates).

    A box reaching outside the axes counts as covering every sample (it would
    be clipped or spill over the neighbouring axes).
    """
    pts = _data_points(ax) if points is None else points
    inner = ax.get_window_extent()
    if box.x0 < inner.x0 - 1 or box.x1 > inner.x1 + 1 or box.y0 < inner.y0 - 1 or box.y1 > inner.y1 + 1:
        return int(pts.shape[0]) + 1
    if pts.shape[0] == 0:
        return 0
    inside = ((pts[:, 0] >= box.x0) & (pts[:, 0] <= box.x1) & (pts[:, 1] >= box.y0) & (pts[:, 1] <= box.y1))
    return int(np.count_nonzero(inside))


def _choose(ax: Axes, make, candidates: Sequence[Any]) -> Text:
    renderer = _renderer(ax)
    points = _data_points(ax)
    best: tuple[int, int, Text] | None = None
    for i, cand in enumerate(candidates):
        art = make(cand)
        art.set_in_layout(False)
        box = art.get_window_extent(renderer).padded(4.0)
        n = covered_samples(ax, box, points)
        legend = ax.get_legend()
        if legend is not None and box.overlaps(legend.get_window_extent(renderer)):
            n += int(points.shape[0]) + 1       # never over the legend
        if best is None or n < best[0]:
            if best is not None:
                best[2].remove()
            best = (n, i, art)
        else:
            art.remove()
        if best[0] == 0:
            break
    assert best is not None
    return best[2]


#: Corners of an axes, as (x, y, ha, va) in axes fraction, in the usual order of preference.
CORNERS = {"upper right": (0.98, 0.96, "right", "top"), "upper left": (0.02, 0.96, "left", "top"),
           "lower left": (0.02, 0.04, "left", "bottom"), "lower right": (0.98, 0.04, "right", "bottom")}


def free_note(ax: Axes, text: str, *, prefer: Sequence[str] = ("upper right", "upper left", "lower left",
                                                                  "lower right"), **style: Any) -> Text:
    """A boxed note in the corner of ``ax`` that covers the fewest data samples."""
    def make(loc: str) -> Text:
        x, y, ha, va = CORNERS[loc]
        return ax.text(x, y, text, transform=ax.transAxes, ha=ha, va=va, zorder=10, **style)
    return _choose(ax, make, prefer)


def free_annotation(ax: Axes, text: str, xy: tuple[float, float], *,
                    offsets: Sequence[tuple[float, float, str, str]] = (
                        (14, 14, "left", "bottom"), (14, -14, "left", "top"),
                        (-14, 14, "right", "bottom"), (-14, -14, "right", "top"),
                        (40, 40, "left", "bottom"), (-40, -40, "right", "top"),
                        (40, -40, "left", "top"), (-40, 40, "right", "bottom")),
                    **style: Any) -> Text:
    """Annotate the data point ``xy`` with ``text`` at the offset (points) that hides the fewest samples.

    ``offsets`` are (dx, dy, ha, va): the text's anchor relative to ``xy`` in points.
    """
    def make(off: tuple[float, float, str, str]) -> Text:
        dx, dy, ha, va = off
        # a label set further off keeps a thin leader line to its point
        lead = ({"arrowprops": {"arrowstyle": "-", "color": style.get("color", "#555555"), "lw": 0.8,
                                "shrinkA": 0, "shrinkB": 4}} if max(abs(dx), abs(dy)) > 20 else {})
        return ax.annotate(text, xy, textcoords="offset points", xytext=(dx, dy), ha=ha, va=va, zorder=10,
                           **lead, **style)
    return _choose(ax, make, offsets)
