"""The one plot style benchfit uses: plain, colour-blind safe, readable in print.

Figures are built as :class:`matplotlib.figure.Figure` objects directly (no
``pyplot``), so no GUI backend is ever touched and nothing is kept in a
global figure list; ``Figure.savefig`` renders through Agg (PNG) or the PDF
backend.

Colours are the eight-colour set of Okabe and Ito, "Color Universal Design
(CUD): how to make figures and presentations that are friendly to colorblind
people" (2008), chosen because every pair stays distinguishable under the
common colour-vision deficiencies and in greyscale print when paired with
distinct line styles, which every plot here also uses.
"""

from __future__ import annotations

import contextlib
import functools
from collections.abc import Callable, Iterator
from typing import Any, TypeVar

import matplotlib
from matplotlib.axes import Axes
from matplotlib.figure import Figure
from matplotlib.ticker import FuncFormatter, LogLocator, NullFormatter

from benchfit.numfmt import eng, tick  # noqa: F401  (eng: the one formatter, used by every plot module)

#: Okabe–Ito palette (2008), by role.
BLACK = "#000000"
ORANGE = "#E69F00"
SKY_BLUE = "#56B4E9"
GREEN = "#009E73"
YELLOW = "#F0E442"
BLUE = "#0072B2"
VERMILLION = "#D55E00"
PURPLE = "#CC79A7"

#: Roles: what each colour means across every figure, so a reader learns it once.
MEASURED = BLACK
MODEL = BLUE
SECOND = ORANGE          # a second curve of the same kind (snapped, closed loop...)
TARGET = GREEN           # targets and limits
WARN = VERMILLION        # what needs attention: RHP zeros, failed yield, the −1 point
EXTRA = PURPLE
SPREAD = SKY_BLUE

_RC: dict[str, Any] = {
    "font.size": 10.5,
    "axes.titlesize": 11.5,
    "axes.titleweight": "bold",
    "axes.titlelocation": "left",
    "axes.labelsize": 10.5,
    "axes.linewidth": 0.9,
    "axes.edgecolor": "#333333",
    "axes.grid": True,
    "axes.grid.which": "both",
    "axes.spines.top": False,
    "axes.spines.right": False,
    "axes.prop_cycle": matplotlib.cycler(color=[BLUE, ORANGE, GREEN, VERMILLION, PURPLE, SKY_BLUE, BLACK]),
    "grid.color": "#D0D0D0",
    "grid.linewidth": 0.6,
    "grid.linestyle": "-",
    "lines.linewidth": 1.8,
    "lines.markersize": 4.5,
    "legend.fontsize": 9.0,
    "legend.frameon": True,
    "legend.framealpha": 0.92,
    "legend.edgecolor": "#BBBBBB",
    "xtick.labelsize": 9.5,
    "ytick.labelsize": 9.5,
    "xtick.direction": "out",
    "ytick.direction": "out",
    "figure.facecolor": "white",
    "axes.facecolor": "white",
    "savefig.facecolor": "white",
    "figure.dpi": 100,
    "savefig.dpi": 130,
    "pdf.fonttype": 42,          # TrueType in PDFs: text stays selectable
    "text.parse_math": False,    # labels carry file and trace names: a '$' in one is not math
}

F = TypeVar("F", bound=Callable[..., Any])


#: Tick formatter for log-frequency (and log-ohm) axes: 1, 10, 100, 1k, 10k, 1M.
ENG_FORMATTER = FuncFormatter(tick)


def log_axis(ax: Axes, which: str = "x") -> None:
    """Make an axis logarithmic with engineering-prefix decade labels."""
    axis = ax.xaxis if which == "x" else ax.yaxis
    (ax.set_xscale if which == "x" else ax.set_yscale)("log")
    axis.set_major_locator(LogLocator(base=10.0, numticks=15))
    axis.set_minor_locator(LogLocator(base=10.0, subs=tuple(range(2, 10)), numticks=15))
    axis.set_major_formatter(ENG_FORMATTER)
    axis.set_minor_formatter(NullFormatter())


@contextlib.contextmanager
def plot_style() -> Iterator[None]:
    """Context in which benchfit's rc settings apply (they are read at artist creation)."""
    with matplotlib.rc_context(_RC):
        yield


def styled(func: F) -> F:
    """Decorator: build the figure inside :func:`plot_style`."""

    @functools.wraps(func)
    def wrapper(*args: Any, **kwargs: Any) -> Any:
        with plot_style():
            return func(*args, **kwargs)

    return wrapper  # type: ignore[return-value]


def new_figure(width_in: float = 8.0, height_in: float = 5.5) -> Figure:
    """A white figure with constrained layout, detached from pyplot."""
    fig = Figure(figsize=(width_in, height_in), layout="constrained")
    # room for a tick label centred on the last decade (e.g. "1M" at the right edge)
    fig.get_layout_engine().set(w_pad=0.12, h_pad=0.06)
    return fig


def note(ax: Axes, text: str, *, loc: str = "upper right") -> None:
    """A small boxed note in an axes corner (numbers a reader should not have to read off)."""
    x, ha = (0.98, "right") if "right" in loc else (0.02, "left")
    y, va = (0.96, "top") if "upper" in loc else (0.04, "bottom")
    ax.text(x, y, text, transform=ax.transAxes, ha=ha, va=va, fontsize=9,
            bbox={"boxstyle": "round,pad=0.35", "facecolor": "white", "edgecolor": "#999999", "alpha": 0.95},
            zorder=10)
