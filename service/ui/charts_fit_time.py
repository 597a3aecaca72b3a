"""The fit-over-time chart: actual and fitted units by period, and the residuals beneath."""

from __future__ import annotations

import numpy as np
from matplotlib.axes import Axes
from matplotlib.figure import Figure

from service.ui.chartdata_fit_time import FitTimeInputs
from service.ui.charts import (
    AMBER,
    BRICK,
    INK,
    MUTED,
    PLUM,
    SAND,
    SLATE,
    TEAL,
    TIME_HEIGHT,
    Chart,
    count,
    cover_with_ticks,
    heading,
    legend_below,
    new_figure,
    one_at_a_time,
    placeholder,
    plot_top,
    style_axes,
    to_svg,
)
from service.ui.words import plural


def _days(periods: np.ndarray) -> np.ndarray:
    """Dates as matplotlib's day numbers: days since its date epoch, 1970-01-01 (set in charts)."""
    return periods.astype("datetime64[D]").astype(np.int64).astype(np.float64)


def fit_time_text(data: FitTimeInputs) -> tuple[str, tuple[str, ...]]:
    p = data.product
    title = f"Actual and fitted units of {p.sku} ({p.name}) by {data.period}"
    return title, _fit_time_summary(data)


@one_at_a_time("fit-over-time", fit_time_text)
def fit_time_chart(data: FitTimeInputs) -> Chart:
    title, summary = fit_time_text(data)
    if data.periods.size == 0:
        return placeholder("fit-over-time", title, data.note or "No history.", summary[1:])
    figure = fit_time_figure(data, title)
    return Chart("fit-over-time", title, summary, to_svg(figure, title, summary))


def _residuals(data: FitTimeInputs) -> np.ndarray:
    """Which periods get a residual bar: fitted, in the fit and sold."""
    if data.fitted is None:
        return np.zeros(data.periods.size, dtype=bool)
    used: np.ndarray = np.isfinite(data.fitted) & data.in_fit & np.isfinite(data.actual)
    return used


def fit_time_marks(data: FitTimeInputs) -> tuple[str, ...]:
    """The ids of the marks the chart draws (for its caption and its tests)."""
    if data.periods.size == 0:
        return ("placeholder",)
    seen = np.isfinite(data.actual)
    marks = ["actual-units"]
    if (data.promotion & seen).any():
        marks.append("promotion-weeks")
    if (data.stockout & seen).any():
        marks.append("stockout-weeks")
    if data.fitted is not None and np.isfinite(_full_fit_line(data)).any():
        marks.append("fitted-units")
    if _residuals(data).any():
        marks.append("residuals")
    if data.holdout_start is not None:
        marks.append("holdout-window")
        if data.holdout_fitted is not None:
            marks.append("holdout-forecast")
    return tuple(marks)


def _full_fit_line(data: FitTimeInputs) -> np.ndarray:
    """The full fit's units, left out over the hold-out when the hold-out's own forecast
    is drawn there instead."""
    assert data.fitted is not None
    line = data.fitted.copy()
    if data.holdout_fitted is not None:
        line[np.isfinite(data.holdout_fitted)] = np.nan
    return line


def fit_time_figure(data: FitTimeInputs, title: str) -> Figure:
    """The drawn chart; its residual panel only when there are residuals to show."""
    figure = new_figure(TIME_HEIGHT)
    marks = fit_time_marks(data)
    if "residuals" in marks:
        grid = figure.add_gridspec(2, 1, height_ratios=(3, 1.2), hspace=0.12)
        top = figure.add_subplot(grid[0])
        residual_panel = figure.add_subplot(grid[1], sharex=top)
        bottom: Axes | None = residual_panel
        panels = [top, residual_panel]
    else:
        top, bottom = figure.add_subplot(), None
        panels = [top]
    for ax in panels:
        style_axes(ax, date_axis=True)
    heading(figure, title)
    days = _days(data.periods)
    seen = np.isfinite(data.actual)
    if data.holdout_start is not None:
        start = float(_days(np.array([data.holdout_start]))[0])
        end = float(days[-1]) + 7.0
        top.axvspan(
            start,
            end,
            facecolor=SAND,
            edgecolor=MUTED,
            hatch="..",
            linewidth=0,
            zorder=0,
            gid="holdout-window",
            label=f"hold-out {data.period}s ({data.holdout_periods})",
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
        if bottom is not None:
            bottom.axvspan(
                start,
                end,
                facecolor=SAND,
                edgecolor=MUTED,
                hatch="..",
                linewidth=0,
                zorder=0,
                gid="holdout-window-residuals",
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
        (data.promotion, "^", AMBER, "promotion-weeks", f"promotion {data.period}"),
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
    drawn: list[np.ndarray] = [data.actual[seen]]
    if "fitted-units" in marks:
        line = _full_fit_line(data)
        ok = np.isfinite(line)
        top.plot(
            days[ok],
            line[ok],
            color=TEAL,
            linewidth=1.8,
            linestyle="--",
            zorder=3,
            gid="fitted-units",
            label="fitted units",
        )
        drawn.append(line[ok])
    if "holdout-forecast" in marks:
        assert data.holdout_fitted is not None
        held = np.isfinite(data.holdout_fitted)
        top.plot(
            days[held],
            data.holdout_fitted[held],
            color=PLUM,
            linewidth=1.8,
            linestyle="-.",
            marker="s",
            markersize=3,
            zorder=3,
            gid="holdout-forecast",
            label=f"hold-out forecast, by a fit made without those {data.period}s",
        )
        drawn.append(data.holdout_fitted[held])
    if bottom is not None:
        assert data.fitted is not None
        used = _residuals(data)
        # One line collection rather than a bar per period: far cheaper to draw.
        bottom.vlines(
            days[used],
            0.0,
            data.actual[used] - data.fitted[used],
            color=SLATE,
            linewidth=2.4,
            gid="residuals",
            label=f"residual (actual - fitted), {data.period}s in the fit",
        )
        bottom.axhline(0.0, color=INK, linewidth=0.8)
        bottom.xaxis_date()
        bottom.set_ylabel("residual")
        bottom.set_xlabel(f"{data.period} starting")
        top.tick_params(labelbottom=False)
        cover_with_ticks(bottom, [data.actual[used] - data.fitted[used], [0.0]])
    else:
        top.xaxis_date()
        top.set_xlabel(f"{data.period} starting")
    top.set_ylabel(f"units per {data.period}")
    top.set_ylim(bottom=0)
    cover_with_ticks(top, [*drawn, [0.0]])
    figure.subplots_adjust(left=0.09, right=0.98, top=plot_top(figure, data.note))
    legend_below(figure, panels, columns=3, height=TIME_HEIGHT)
    return figure


def _fit_time_summary(data: FitTimeInputs) -> tuple[str, ...]:
    p = data.product
    lines = [f"{p.sku}, {p.name}" + (f"; {data.fit_label}." if data.fit_label else ".")]
    if data.periods.size == 0:
        return tuple(lines)
    ok = np.isfinite(data.actual)
    lines.append(
        f"{plural(data.periods.size, data.period)} from {data.periods[0]} to {data.periods[-1]}; "
        "actual units "
        f"{count(float(data.actual[ok].min()))} to {count(float(data.actual[ok].max()))}, "
        f"{plural(int(data.promotion.sum()), 'promotion ' + data.period)}, "
        f"{int(data.stockout.sum())} out of stock."
    )
    if data.fitted is not None:
        used = np.isfinite(data.fitted) & data.in_fit & ok
        if used.any():
            residual = data.actual[used] - data.fitted[used]
            worst = int(np.argmax(np.abs(residual)))
            worst_period = data.periods[used][worst]
            lines.append(
                f"{plural(int(used.sum()), data.period)} entered the fit; residuals range from "
                f"{count(float(residual.min()))} to {count(float(residual.max()))} units "
                f"(largest miss {count(float(residual[worst]))} "
                f"in the {data.period} of {worst_period})."
            )
    if data.r_squared is not None:
        lines.append(f"R² {data.r_squared:.3f}.")
    if data.holdout_start is not None:
        wape = f"{data.holdout_wape:.1%}" if data.holdout_wape is not None else "not scored"
        lines.append(
            f"Hold-out: the last {plural(data.holdout_periods, 'fitted ' + data.period)} from "
            f"{data.holdout_start}; "
            f"weighted absolute percentage error (WAPE) {wape}."
        )
    if data.note:
        lines.append(data.note)
    return tuple(lines)
