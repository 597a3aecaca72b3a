"""Charts as SVG, drawn with matplotlib on the server (no display, no pyplot state).

Each chart comes with a title and a summary in words that repeats the numbers it
shows; both are written into the SVG (``<title>``, ``<desc>``) and onto the pages.
Every series has an id (matplotlib's ``gid``) so tests and scripts can find it, and
every series differs by marker or line style as well as by colour.

This module holds what every chart shares: matplotlib's settings, the palette, the
:class:`Chart` record and the drawing helpers. Each kind of chart is drawn in a module of
its own (:mod:`service.ui.charts_demand`, :mod:`service.ui.charts_money`,
:mod:`service.ui.charts_fit_time`).
"""

from __future__ import annotations

import functools
import io
import math
import re
import textwrap
import threading
import unicodedata
import warnings
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any, TypeVar
from xml.sax.saxutils import escape

import matplotlib
import numpy as np

matplotlib.use("Agg")
matplotlib.rcParams.update(
    {
        "svg.fonttype": "none",  # text stays text: searchable, selectable, read aloud
        "svg.hashsalt": "marginal",  # stable element ids, so equal charts are equal bytes
        "date.epoch": "1970-01-01T00:00:00",  # day numbers of dates, see charts_fit_time
        # Text is drawn as written: a product name such as "Cost $5 and $6" is no formula.
        "text.parse_math": False,
        "text.usetex": False,
        "font.size": 9,
        "axes.spines.top": False,
        "axes.spines.right": False,
    }
)

from matplotlib.axes import Axes  # noqa: E402
from matplotlib.figure import Figure  # noqa: E402
from matplotlib.ticker import MaxNLocator  # noqa: E402

# Our palette: ink and paper with a few earthy accents.
INK = "#24313d"
MUTED = "#8a949c"
GRID = "#e1e5e8"
SLATE = "#3e5c86"
TEAL = "#1e7770"
AMBER = "#c58415"
BRICK = "#a8412d"
PLUM = "#74406b"
SAND = "#f1e9d6"
SAGE = "#dcebe2"

# matplotlib's text layout shares font objects between figures, so one chart is laid out
# and written at a time (server threads queue here; drawing is CPU-bound anyway).
_draw_lock = threading.RLock()
ChartInputs = TypeVar("ChartInputs")


UNDRAWABLE = (
    "The numbers of this product are too large or too small to draw (beyond what a chart's "
    "axis can hold); the summary below still gives them."
)
# What drawing raises on numbers near the limits of double precision: an axis whose
# limits or margins overflow, a transform that divides by zero.
_DRAWING_FAILURES = (
    ValueError,
    OverflowError,
    FloatingPointError,
    ZeroDivisionError,
    RuntimeWarning,
)


def one_at_a_time(
    kind: str, text: Callable[[ChartInputs], tuple[str, tuple[str, ...]]]
) -> Callable[[Callable[[ChartInputs], Chart]], Callable[[ChartInputs], Chart]]:
    """Draw one chart at a time; a chart whose numbers cannot be drawn becomes a chart
    that says so, with the same title and summary (a chart is always drawn)."""

    def decorate(draw: Callable[[ChartInputs], Chart]) -> Callable[[ChartInputs], Chart]:
        @functools.wraps(draw)
        def serialised(data: ChartInputs) -> Chart:
            with _draw_lock:
                try:
                    with warnings.catch_warnings():
                        # A name in a script the bundled font lacks is drawn with empty
                        # boxes; that is no reason to warn on every chart. (Drawing is
                        # serialised, so these filters only ever overlap threads that are
                        # not drawing.) Overflow on the way is a failure to draw.
                        warnings.filterwarnings(
                            "ignore", r"Glyph \d+ .*missing from font", UserWarning
                        )
                        warnings.simplefilter("error", RuntimeWarning)
                        return draw(data)
                except _DRAWING_FAILURES:
                    with warnings.catch_warnings():
                        warnings.filterwarnings(
                            "ignore", r"Glyph \d+ .*missing from font", UserWarning
                        )
                        warnings.simplefilter("ignore", RuntimeWarning)
                        title, summary = text(data)
                        return placeholder(kind, title, UNDRAWABLE, summary[1:])

        return serialised

    return decorate


@dataclass(frozen=True)
class Chart:
    kind: str
    title: str
    summary: tuple[str, ...]
    svg: bytes


def money(value: float | None, currency: str = "") -> str:
    if value is None or not math.isfinite(value):
        return "n/a"
    text = f"{value:,.2f}"
    return f"{text} {currency}".strip()


def count(value: float | None) -> str:
    if value is None or not math.isfinite(value):
        return "n/a"
    return f"{value:,.1f}" if abs(value) < 100 else f"{value:,.0f}"


def to_svg(figure: Figure, title: str, summary: Sequence[str]) -> bytes:
    buffer = io.StringIO()
    with _draw_lock:  # also taken by the chart functions; re-entrant
        figure.savefig(buffer, format="svg", metadata={"Date": None, "Creator": "Marginal"})
    text = buffer.getvalue()
    head = (
        f'<title id="chart-title">{escape(plain(title))}</title>'
        f'<desc id="chart-desc">{escape(plain(" ".join(summary)))}</desc>'
    )
    text = re.sub(
        r"<svg\b([^>]*)>",
        lambda m: f'<svg role="img" aria-labelledby="chart-title chart-desc"{m.group(1)}>{head}',
        text,
        count=1,
    )
    return text.encode()


DEMAND_HEIGHT = 4.9
TIME_HEIGHT = 5.4


def new_figure(height: float = DEMAND_HEIGHT) -> Figure:
    figure = Figure(figsize=(7.6, height), dpi=100, facecolor="white")
    return figure


def plain(text: str) -> str:
    """Text without control characters (a product name may hold any): XML does not allow
    them in an SVG, and no font draws them."""
    return "".join(c for c in text if c in "\n\t" or not unicodedata.category(c).startswith("C"))


def heading(figure: Figure, title: str) -> None:
    """The title in figure coordinates: an axes title would be re-placed around the tick
    labels at every drawing, which costs more than the rest of a chart's text."""
    figure.text(
        0.015,
        0.985,
        plain(title),
        ha="left",
        va="top",
        fontsize=10.5,
        fontweight="bold",
        color=INK,
        gid="chart-heading",
    )


def style_axes(ax: Axes, *, date_axis: bool = False) -> None:
    ax.grid(True, color=GRID, linewidth=0.7)
    ax.set_axisbelow(True)
    ax.tick_params(colors=INK, labelsize=8)
    # Fewer ticks: each is several artists, and tick creation dominates drawing time.
    ax.yaxis.set_major_locator(MaxNLocator(nbins=5))
    if not date_axis:
        ax.xaxis.set_major_locator(MaxNLocator(nbins=7))
    for spine in ax.spines.values():
        spine.set_color(MUTED)


# The top of the plot area, in inches below the figure's top edge: room for the heading.
HEADING_INCHES = 0.39
# A note's lines: characters per line at 8.5 pt across the chart, and inches per line.
NOTE_CHARS = 110
NOTE_LINE_INCHES = 0.15


def plot_top(figure: Figure, note: str | None, gid: str = "chart-note") -> float:
    """Where the plot area starts (a fraction of the figure's height): under the heading,
    and under the note when there is one. The note sits between the heading and the plot,
    so it never hides a mark or a label drawn inside the plot."""
    height = figure.get_figheight()
    if not note:
        return 1.0 - HEADING_INCHES / height
    lines = textwrap.wrap(plain(note), NOTE_CHARS) or [""]
    figure.text(
        0.5,
        1.0 - (HEADING_INCHES - 0.02) / height,
        "\n".join(lines),
        ha="center",
        va="top",
        fontsize=8.5,
        color=INK,
        gid=gid,
        bbox={"boxstyle": "round,pad=0.4", "facecolor": "white", "edgecolor": MUTED},
    )
    used = HEADING_INCHES + NOTE_LINE_INCHES * len(lines) + 0.22
    return 1.0 - used / height


def cover_with_ticks(ax: Axes, values: Sequence[Any]) -> None:
    """Widen the value axis to the nearest ticks beyond the data, so no line runs above
    the top tick or below the bottom one (``values``: the arrays drawn on it)."""
    finite = [np.asarray(v, dtype=float) for v in values]
    finite = [v[np.isfinite(v)] for v in finite]
    finite = [v for v in finite if v.size]
    if not finite:
        return
    data_low = min(float(v.min()) for v in finite)
    data_high = max(float(v.max()) for v in finite)
    for _ in range(4):  # new limits can move the ticks; settle within a few rounds
        low, high = ax.get_ylim()
        slack = 1e-9 * (high - low)
        ticks = [t for t in ax.get_yticks() if low - slack <= t <= high + slack]
        if len(ticks) < 2:
            return
        step = ticks[1] - ticks[0]
        top, bottom = ticks[-1], ticks[0]
        if top < data_high:
            high = top + step * math.ceil((data_high - top) / step)
        if bottom > data_low:
            low = bottom - step * math.ceil((bottom - data_low) / step)
        if (low, high) == ax.get_ylim():
            return
        ax.set_ylim(low, high)


def placeholder(kind: str, title: str, message: str, summary: Sequence[str]) -> Chart:
    figure = new_figure(3.0)
    ax = figure.add_subplot()
    ax.set_axis_off()
    heading(figure, title)
    ax.text(
        0.5,
        0.5,
        message,
        transform=ax.transAxes,
        ha="center",
        va="center",
        fontsize=10,
        color=INK,
        wrap=True,
        gid="placeholder",
        bbox={"boxstyle": "round,pad=0.8", "facecolor": SAND, "edgecolor": MUTED},
    )
    lines = (message, *summary)
    return Chart(kind, title, lines, to_svg(figure, title, lines))


def legend_below(figure: Figure, axes: Sequence[Axes], columns: int, height: float) -> None:
    """The legend under the plot, with just the room its rows need."""
    handles: list[Any] = []
    labels: list[str] = []
    for ax in axes:
        more_handles, more_labels = ax.get_legend_handles_labels()
        handles += more_handles
        labels += more_labels
    rows = math.ceil(len(handles) / columns) if handles else 0
    if handles:
        figure.legend(
            handles,
            labels,
            loc="lower center",
            ncol=columns,
            frameon=False,
            fontsize=7.5,
            bbox_to_anchor=(0.5, 0.01),
        )
    # Legend rows are about 0.19 inch high; the axis labels need about 0.55 inch.
    figure.subplots_adjust(bottom=(0.55 + 0.19 * rows) / height)
