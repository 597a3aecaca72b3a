"""Charts as SVG, drawn with matplotlib on the server (no display, no pyplot state).

Each chart comes with a title and a summary in words that repeats the numbers it
shows; both are written into the SVG (``<title>``, ``<desc>``) and onto the pages.
Every series has an id (matplotlib's ``gid``) so tests and scripts can find it, and
every series differs by marker or line style as well as by colour.
"""

from __future__ import annotations

import functools
import io
import math
import re
import threading
import unicodedata
import warnings
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any, TypeVar
from xml.sax.saxutils import escape

import matplotlib

matplotlib.use("Agg")
matplotlib.rcParams.update(
    {
        "svg.fonttype": "none",  # text stays text: searchable, selectable, read aloud
        "svg.hashsalt": "marginal",  # stable element ids, so equal charts are equal bytes
        "date.epoch": "1970-01-01T00:00:00",  # day numbers of dates, see _days
        "font.size": 9,
        "axes.spines.top": False,
        "axes.spines.right": False,
    }
)

import numpy as np  # noqa: E402
from matplotlib.axes import Axes  # noqa: E402
from matplotlib.figure import Figure  # noqa: E402
from matplotlib.ticker import MaxNLocator  # noqa: E402

from service.ui import words  # noqa: E402
from service.ui.chartdata_demand import DemandInputs  # noqa: E402
from service.ui.chartdata_fit_time import FitTimeInputs  # noqa: E402
from service.ui.chartdata_money import MoneyInputs  # noqa: E402

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


def _one_at_a_time(draw: Callable[[ChartInputs], Chart]) -> Callable[[ChartInputs], Chart]:
    @functools.wraps(draw)
    def serialised(data: ChartInputs) -> Chart:
        with _draw_lock, warnings.catch_warnings():
            # A name in a script the bundled font lacks is drawn with empty boxes; that is
            # no reason to warn on every chart. (Drawing is serialised, so this filter
            # only ever overlaps threads that are not drawing.)
            warnings.filterwarnings("ignore", r"Glyph \d+ .*missing from font", UserWarning)
            return draw(data)

    return serialised


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


def _svg(figure: Figure, title: str, summary: Sequence[str]) -> bytes:
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


def _figure(height: float = DEMAND_HEIGHT) -> Figure:
    figure = Figure(figsize=(7.6, height), dpi=100, facecolor="white")
    return figure


def plain(text: str) -> str:
    """Text without control characters (a product name may hold any): XML does not allow
    them in an SVG, and no font draws them."""
    return "".join(c for c in text if c in "\n\t" or not unicodedata.category(c).startswith("C"))


def _heading(figure: Figure, title: str) -> None:
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


def _style(ax: Axes, *, date_axis: bool = False) -> None:
    ax.grid(True, color=GRID, linewidth=0.7)
    ax.set_axisbelow(True)
    ax.tick_params(colors=INK, labelsize=8)
    # Fewer ticks: each is several artists, and tick creation dominates drawing time.
    ax.yaxis.set_major_locator(MaxNLocator(nbins=5))
    if not date_axis:
        ax.xaxis.set_major_locator(MaxNLocator(nbins=7))
    for spine in ax.spines.values():
        spine.set_color(MUTED)


def _note(ax: Axes, text: str, gid: str = "chart-note") -> None:
    ax.text(
        0.5,
        0.97,
        plain(text),
        transform=ax.transAxes,
        ha="center",
        va="top",
        fontsize=8.5,
        color=INK,
        wrap=True,
        gid=gid,
        bbox={"boxstyle": "round,pad=0.4", "facecolor": "white", "edgecolor": MUTED},
    )


def _placeholder(kind: str, title: str, message: str, summary: Sequence[str]) -> Chart:
    figure = _figure(3.0)
    ax = figure.add_subplot()
    ax.set_axis_off()
    _heading(figure, title)
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
    return Chart(kind, title, lines, _svg(figure, title, lines))


def _legend(figure: Figure, axes: Sequence[Axes], columns: int, height: float) -> None:
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


# -- demand --------------------------------------------------------------------------------

_POINT_STYLE: dict[str, dict[str, Any]] = {
    "regular": {"marker": "o", "c": SLATE, "s": 18},
    "promotion": {"marker": "^", "c": AMBER, "s": 30},
    "stockout": {"marker": "x", "c": BRICK, "s": 30},
    "outside": {"marker": "o", "facecolors": "none", "edgecolors": MUTED, "s": 14},
}


def _scenario_words(values: dict[str, float]) -> str:
    return ", ".join(f"{name} {value:g}" for name, value in sorted(values.items()))


def demand_text(data: DemandInputs) -> tuple[str, tuple[str, ...]]:
    p = data.product
    return f"Demand for {p.sku} ({p.name}): units against price", _demand_summary(data)


@_one_at_a_time
def demand_chart(data: DemandInputs) -> Chart:
    title, summary = demand_text(data)
    p = data.product
    if not data.groups and data.band is None:
        return _placeholder("demand", title, data.note or "Nothing to show yet.", summary[1:])
    figure = _figure()
    ax = figure.add_subplot()
    _style(ax)
    _heading(figure, title)
    if data.observed_range is not None:
        low, high = data.observed_range
        ax.axvspan(
            low,
            high,
            color=SAND,
            zorder=0,
            gid="observed-range",
            label=f"prices seen in the fit: {low:.2f} to {high:.2f}",
        )
    for group in data.groups:
        ax.scatter(
            group.price,
            group.units,
            linewidths=1.0,
            zorder=3,
            gid=f"weeks-{group.kind}",
            label=f"{group.label} ({group.price.size})",
            **_POINT_STYLE[group.kind],
        )
    band = data.band
    if band is not None:
        ax.fill_between(
            band.price,
            band.low,
            band.high,
            color=TEAL,
            alpha=0.16,
            linewidth=0,
            zorder=1,
            gid="demand-band",
            label=f"{band.level:.0%} range for one week's units",
        )
        low, high = data.observed_range or (band.price[0], band.price[-1])
        inside = (band.price >= low) & (band.price <= high)
        ax.plot(
            band.price[inside],
            band.expected[inside],
            color=TEAL,
            linewidth=2.2,
            zorder=4,
            gid="demand-curve",
            label="expected units (fitted curve)",
        )
        below, above = band.price <= low, band.price >= high
        if below.sum() > 1:
            ax.plot(
                band.price[below],
                band.expected[below],
                color=TEAL,
                linewidth=1.6,
                linestyle="--",
                zorder=4,
                gid="demand-curve-below-range",
                label="expected units beyond the prices seen",
            )
        if above.sum() > 1:
            ax.plot(
                band.price[above],
                band.expected[above],
                color=TEAL,
                linewidth=1.6,
                linestyle="--",
                zorder=4,
                gid="demand-curve-above-range",
                label=None if below.sum() > 1 else "expected units beyond the prices seen",
            )
    _price_marks(ax, data.current_price, data.recommended_price)
    ax.set_xlabel(f"price ({p.currency})")
    ax.set_ylabel("units per week")
    ax.set_ylim(bottom=0)
    if data.note:
        _note(ax, data.note)
    figure.subplots_adjust(left=0.09, right=0.98, top=0.92)
    _legend(figure, [ax], columns=3, height=DEMAND_HEIGHT)
    return Chart("demand", title, summary, _svg(figure, title, summary))


def _price_marks(ax: Axes, current: float | None, recommended: float | None) -> None:
    top = 0.99
    if current is not None:
        ax.axvline(
            current,
            color=INK,
            linestyle=":",
            linewidth=1.6,
            zorder=5,
            gid="current-price",
            label=f"current price {current:.2f}",
        )
        ax.text(
            current,
            top,
            " current",
            transform=ax.get_xaxis_transform(),
            va="top",
            ha="left",
            fontsize=7.5,
            color=INK,
            gid="current-price-label",
        )
    if recommended is not None:
        ax.axvline(
            recommended,
            color=PLUM,
            linestyle="-.",
            linewidth=1.6,
            zorder=5,
            gid="recommended-price",
            label=f"recommended price {recommended:.2f}",
        )
        ax.text(
            recommended,
            top - 0.06,
            " recommended",
            transform=ax.get_xaxis_transform(),
            va="top",
            ha="left",
            fontsize=7.5,
            color=PLUM,
            gid="recommended-price-label",
        )


def _demand_summary(data: DemandInputs) -> tuple[str, ...]:
    p = data.product
    lines = [f"{p.sku}, {p.name}" + (f"; {data.fit_label}." if data.fit_label else ".")]
    weeks = sum(g.price.size for g in data.groups)
    if weeks:
        prices = np.concatenate([g.price for g in data.groups])
        units = np.concatenate([g.units for g in data.groups])
        kinds = ", ".join(f"{g.price.size} {g.label}" for g in data.groups)
        lines.append(
            f"{weeks} past weeks ({kinds}); prices {money(prices.min())} to "
            f"{money(prices.max(), p.currency)}, "
            f"units {count(units.min())} to {count(units.max())}."
        )
    if data.observed_range is not None:
        low, high = data.observed_range
        lines.append(f"The fit saw prices from {money(low)} to {money(high, p.currency)}.")
    band = data.band
    if band is not None:
        lines.append(
            f"Expected units go from {count(band.expected[0])} at {money(band.price[0])} "
            f"to {count(band.expected[-1])} at {money(band.price[-1], p.currency)}."
        )
        for name, price in (
            ("current", data.current_price),
            ("recommended", data.recommended_price),
        ):
            if price is not None:
                i = int(np.argmin(np.abs(band.price - price)))
                lines.append(
                    f"At the {name} price {money(price, p.currency)}: about "
                    f"{count(float(np.interp(price, band.price, band.expected)))} units "
                    f"({band.level:.0%} range for one week {count(band.low[i])} to "
                    f"{count(band.high[i])})."
                )
        if data.scenario:
            lines.append(
                f"Other drivers held at {data.scenario_source}: {_scenario_words(data.scenario)}."
            )
    else:
        for name, price in (
            ("Current", data.current_price),
            ("Recommended", data.recommended_price),
        ):
            if price is not None:
                lines.append(f"{name} price {money(price, p.currency)}.")
    if data.note:
        lines.append(data.note)
    return tuple(lines)


# -- money ---------------------------------------------------------------------------------


def money_text(data: MoneyInputs) -> tuple[str, tuple[str, ...]]:
    p = data.product
    return f"Revenue and profit of {p.sku} ({p.name}) against price", _money_summary(data)


@_one_at_a_time
def money_chart(data: MoneyInputs) -> Chart:
    title, summary = money_text(data)
    p = data.product
    if not data.drawn:
        return _placeholder("money", title, data.note or "No price can be weighed.", summary[1:])
    figure = _figure()
    ax = figure.add_subplot()
    _style(ax)
    _heading(figure, title)
    if data.feasible is not None:
        low, high = data.feasible
        right = high if high is not None else float(data.price[-1])
        ax.axvspan(
            low,
            right,
            facecolor=SAGE,
            edgecolor=TEAL,
            hatch="//",
            linewidth=0,
            alpha=0.6,
            zorder=0,
            gid="feasible-band",
            label=f"prices the rules allow: {low:.2f} to "
            + (f"{high:.2f}" if high is not None else "no upper limit"),
        )
    ax.plot(
        data.price,
        data.revenue,
        color=SLATE,
        linewidth=2.0,
        gid="revenue-curve",
        label="revenue (price x expected units)",
    )
    if data.profit is not None:
        ax.plot(
            data.price,
            data.profit,
            color=TEAL,
            linewidth=2.0,
            linestyle="--",
            gid="profit-curve",
            label="profit ((price - unit cost) x units)",
        )
        ax.axhline(0.0, color=MUTED, linewidth=0.8, zorder=1)
    if data.best_price is not None and data.best_value is not None:
        ax.axvline(data.best_price, color=PLUM, linestyle="-.", linewidth=1.4, zorder=5)
        ax.plot(
            [data.best_price],
            [data.best_value],
            marker="*",
            markersize=14,
            color=PLUM,
            linestyle="none",
            zorder=6,
            gid="best-price",
            label=f"best {data.objective} under the rules at {data.best_price:.2f}",
        )
    if data.current_price is not None:
        ax.axvline(
            data.current_price,
            color=INK,
            linestyle=":",
            linewidth=1.6,
            zorder=5,
            gid="current-price",
            label=f"current price {data.current_price:.2f}",
        )
        if data.current_value is not None:
            ax.plot(
                [data.current_price],
                [data.current_value],
                marker="o",
                markersize=7,
                markerfacecolor="white",
                markeredgecolor=INK,
                linestyle="none",
                zorder=6,
                gid="current-point",
            )
    free = data.unconstrained_price
    if free is not None and data.best_price is not None and abs(free / data.best_price - 1) > 0.005:
        lo, hi = float(data.price[0]), float(data.price[-1])
        if lo <= free <= hi:
            ax.axvline(
                free,
                color=MUTED,
                linestyle=(0, (4, 2, 1, 2)),
                linewidth=1.2,
                gid="unconstrained-price",
                label=f"best price with no rules {free:.2f}",
            )
    if data.stored_price is not None:
        ax.axvline(
            data.stored_price,
            color=PLUM,
            linestyle=":",
            linewidth=1.2,
            gid="stored-recommendation",
            label=f"stored recommendation {data.stored_price:.2f} (other fit)",
        )
    if data.price_interval is not None:
        low, high = data.price_interval
        y = ax.get_ylim()[0] + 0.06 * (ax.get_ylim()[1] - ax.get_ylim()[0])
        ax.plot(
            [low, high],
            [y, y],
            color=PLUM,
            linewidth=3,
            marker="|",
            markersize=12,
            markeredgewidth=2,
            solid_capstyle="butt",
            zorder=6,
            gid="price-interval",
            label=f"90% range of the best price ({data.draws} draws): {low:.2f} to {high:.2f}",
        )
    ax.set_xlabel(f"price ({p.currency})")
    ax.set_ylabel(f"per week ({p.currency})")
    if data.note:
        _note(ax, data.note)
    figure.subplots_adjust(left=0.1, right=0.98, top=0.92)
    _legend(figure, [ax], columns=2, height=DEMAND_HEIGHT)
    return Chart("money", title, summary, _svg(figure, title, summary))


def _money_summary(data: MoneyInputs) -> tuple[str, ...]:
    p = data.product
    lines = [f"{p.sku}, {p.name}" + (f"; {data.fit_label}." if data.fit_label else ".")]
    if not data.drawn:
        return tuple(lines)
    c = p.currency
    lines.append(f"Rules from {data.rules_source}; objective: {data.objective}.")
    top = int(np.argmax(data.revenue))
    lines.append(
        f"Revenue runs from {money(float(data.revenue[0]))} at {money(float(data.price[0]))} to "
        f"{money(float(data.revenue[-1]))} at {money(float(data.price[-1]), c)}, highest "
        f"{money(float(data.revenue[top]), c)} at {money(float(data.price[top]), c)} on this range."
    )
    if data.profit is not None:
        top = int(np.argmax(data.profit))
        lines.append(
            f"Profit is highest on this range at {money(float(data.price[top]), c)} "
            f"({money(float(data.profit[top]), c)})."
        )
    if data.feasible is not None:
        low, high = data.feasible
        lines.append(
            f"The rules allow prices from {money(low)} to "
            + (money(high, c) if high is not None else "any higher price")
            + (f"; held back by {words.rules_words(data.binding)}." if data.binding else ".")
        )
    if data.best_price is not None:
        lines.append(
            f"Best price under the rules: {money(data.best_price, c)}, expected {data.objective} "
            f"{money(data.best_value, c)}"
            + (
                f" against {money(data.current_value, c)} at the current price "
                f"{money(data.current_price, c)}."
                if data.current_price is not None
                else "."
            )
        )
    if data.unconstrained_price is not None:
        lines.append(
            f"With no rules at all the best price would be {money(data.unconstrained_price, c)}."
        )
    else:
        lines.append("With no rules at all the objective keeps growing: no finite best price.")
    if data.price_interval is not None:
        low, high = data.price_interval
        chance = (
            f"; in {data.prob_better:.0%} of them it beats the current price"
            if data.prob_better is not None
            else ""
        )
        lines.append(
            f"Across {data.draws} coefficient draws the best price lies between {money(low)} and "
            f"{money(high, c)} (90% range){chance}."
        )
    lines.extend(data.warnings)
    if data.note:
        lines.append(data.note)
    return tuple(lines)


# -- fit over time -------------------------------------------------------------------------


def _days(periods: np.ndarray) -> np.ndarray:
    """Dates as matplotlib's day numbers: days since its date epoch, 1970-01-01 (set above)."""
    return periods.astype("datetime64[D]").astype(np.int64).astype(np.float64)


def fit_time_text(data: FitTimeInputs) -> tuple[str, tuple[str, ...]]:
    p = data.product
    return f"Actual and fitted units of {p.sku} ({p.name}) by week", _fit_time_summary(data)


@_one_at_a_time
def fit_time_chart(data: FitTimeInputs) -> Chart:
    title, summary = fit_time_text(data)
    if data.periods.size == 0:
        return _placeholder("fit-over-time", title, data.note or "No history.", summary[1:])
    figure = _figure(TIME_HEIGHT)
    grid = figure.add_gridspec(2, 1, height_ratios=(3, 1.2), hspace=0.12)
    top = figure.add_subplot(grid[0])
    bottom = figure.add_subplot(grid[1], sharex=top)
    for ax in (top, bottom):
        _style(ax, date_axis=True)
    _heading(figure, title)
    days = _days(data.periods)
    seen = np.isfinite(data.actual)
    if data.holdout_start is not None:
        start = float(_days(np.array([data.holdout_start]))[0])
        end = float(days[-1]) + 7.0
        top.axvspan(
            start,
            end,
            facecolor=SAND,
            linewidth=0,
            zorder=0,
            gid="holdout-window",
            label=f"hold-out weeks ({data.holdout_weeks}), scored by a fit made without them",
        )
        top.text(
            start,
            0.99,
            " hold-out",
            transform=top.get_xaxis_transform(),
            va="top",
            ha="left",
            fontsize=7.5,
            color=INK,
            gid="holdout-label",
        )
        bottom.axvspan(
            start, end, facecolor=SAND, linewidth=0, zorder=0, gid="holdout-window-residuals"
        )
    top.plot(
        days[seen],
        data.actual[seen],
        color=INK,
        linewidth=1.2,
        marker="o",
        markersize=2.5,
        gid="actual-units",
        label="actual units",
    )
    for mask, marker, color, gid, label in (
        (data.promotion, "^", AMBER, "promotion-weeks", "promotion week"),
        (data.stockout, "x", BRICK, "stockout-weeks", "out of stock"),
    ):
        chosen = mask & seen
        if chosen.any():
            top.scatter(
                days[chosen],
                data.actual[chosen],
                marker=marker,
                c=color,
                s=28,
                zorder=4,
                gid=gid,
                label=f"{label} ({int(chosen.sum())})",
            )
    fitted = data.fitted
    if fitted is not None:
        ok = np.isfinite(fitted)
        if ok.any():
            top.plot(
                days[ok],
                fitted[ok],
                color=TEAL,
                linewidth=1.8,
                linestyle="--",
                zorder=3,
                gid="fitted-units",
                label="fitted units",
            )
        used = ok & data.in_fit & seen
        if used.any():
            # One line collection rather than a bar per week: far cheaper to draw.
            bottom.vlines(
                days[used],
                0.0,
                data.actual[used] - fitted[used],
                color=SLATE,
                linewidth=2.4,
                gid="residuals",
                label="residual (actual - fitted), weeks in the fit",
            )
    bottom.axhline(0.0, color=INK, linewidth=0.8)
    bottom.xaxis_date()
    top.set_ylabel("units per week")
    top.set_ylim(bottom=0)
    bottom.set_ylabel("residual")
    bottom.set_xlabel("week starting")
    top.tick_params(labelbottom=False)
    if data.note:
        _note(top, data.note)
    figure.subplots_adjust(left=0.09, right=0.98, top=0.93)
    _legend(figure, [top, bottom], columns=3, height=TIME_HEIGHT)
    return Chart("fit-over-time", title, summary, _svg(figure, title, summary))


def _fit_time_summary(data: FitTimeInputs) -> tuple[str, ...]:
    p = data.product
    lines = [f"{p.sku}, {p.name}" + (f"; {data.fit_label}." if data.fit_label else ".")]
    if data.periods.size == 0:
        return tuple(lines)
    ok = np.isfinite(data.actual)
    lines.append(
        f"{data.periods.size} weeks from {data.periods[0]} to {data.periods[-1]}; actual units "
        f"{count(float(data.actual[ok].min()))} to {count(float(data.actual[ok].max()))}, "
        f"{int(data.promotion.sum())} promotion weeks, {int(data.stockout.sum())} out of stock."
    )
    if data.fitted is not None:
        used = np.isfinite(data.fitted) & data.in_fit & ok
        if used.any():
            residual = data.actual[used] - data.fitted[used]
            worst = int(np.argmax(np.abs(residual)))
            worst_week = data.periods[used][worst]
            lines.append(
                f"{int(used.sum())} weeks entered the fit; residuals range from "
                f"{count(float(residual.min()))} to {count(float(residual.max()))} units "
                f"(largest miss {count(float(residual[worst]))} in the week of {worst_week})."
            )
    if data.r_squared is not None:
        lines.append(f"R-squared {data.r_squared:.3f}.")
    if data.holdout_start is not None:
        wape = f"{data.holdout_wape:.1%}" if data.holdout_wape is not None else "not scored"
        lines.append(
            f"Hold-out: the last {data.holdout_weeks} fitted weeks from {data.holdout_start}; "
            f"weighted absolute percentage error (WAPE) {wape}."
        )
    if data.note:
        lines.append(data.note)
    return tuple(lines)
