"""The fit-over-time chart: actual and fitted units by week, and the residuals beneath."""

from __future__ import annotations

import numpy as np

from service.ui.chartdata_fit_time import FitTimeInputs
from service.ui.charts import (
    AMBER,
    BRICK,
    INK,
    SAND,
    SLATE,
    TEAL,
    TIME_HEIGHT,
    Chart,
    count,
    heading,
    legend_below,
    new_figure,
    note_box,
    one_at_a_time,
    placeholder,
    style_axes,
    to_svg,
)
from service.ui.words import plural


def _days(periods: np.ndarray) -> np.ndarray:
    """Dates as matplotlib's day numbers: days since its date epoch, 1970-01-01 (set in charts)."""
    return periods.astype("datetime64[D]").astype(np.int64).astype(np.float64)


def fit_time_text(data: FitTimeInputs) -> tuple[str, tuple[str, ...]]:
    p = data.product
    return f"Actual and fitted units of {p.sku} ({p.name}) by week", _fit_time_summary(data)


@one_at_a_time("fit-over-time", fit_time_text)
def fit_time_chart(data: FitTimeInputs) -> Chart:
    title, summary = fit_time_text(data)
    if data.periods.size == 0:
        return placeholder("fit-over-time", title, data.note or "No history.", summary[1:])
    figure = new_figure(TIME_HEIGHT)
    grid = figure.add_gridspec(2, 1, height_ratios=(3, 1.2), hspace=0.12)
    top = figure.add_subplot(grid[0])
    bottom = figure.add_subplot(grid[1], sharex=top)
    for ax in (top, bottom):
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
        note_box(top, data.note)
    figure.subplots_adjust(left=0.09, right=0.98, top=0.93)
    legend_below(figure, [top, bottom], columns=3, height=TIME_HEIGHT)
    return Chart("fit-over-time", title, summary, to_svg(figure, title, summary))


def _fit_time_summary(data: FitTimeInputs) -> tuple[str, ...]:
    p = data.product
    lines = [f"{p.sku}, {p.name}" + (f"; {data.fit_label}." if data.fit_label else ".")]
    if data.periods.size == 0:
        return tuple(lines)
    ok = np.isfinite(data.actual)
    lines.append(
        f"{plural(data.periods.size, 'week')} from {data.periods[0]} to {data.periods[-1]}; "
        "actual units "
        f"{count(float(data.actual[ok].min()))} to {count(float(data.actual[ok].max()))}, "
        f"{plural(int(data.promotion.sum()), 'promotion week')}, "
        f"{int(data.stockout.sum())} out of stock."
    )
    if data.fitted is not None:
        used = np.isfinite(data.fitted) & data.in_fit & ok
        if used.any():
            residual = data.actual[used] - data.fitted[used]
            worst = int(np.argmax(np.abs(residual)))
            worst_week = data.periods[used][worst]
            lines.append(
                f"{plural(int(used.sum()), 'week')} entered the fit; residuals range from "
                f"{count(float(residual.min()))} to {count(float(residual.max()))} units "
                f"(largest miss {count(float(residual[worst]))} in the week of {worst_week})."
            )
    if data.r_squared is not None:
        lines.append(f"R² {data.r_squared:.3f}.")
    if data.holdout_start is not None:
        wape = f"{data.holdout_wape:.1%}" if data.holdout_wape is not None else "not scored"
        lines.append(
            f"Hold-out: the last {plural(data.holdout_weeks, 'fitted week')} from "
            f"{data.holdout_start}; "
            f"weighted absolute percentage error (WAPE) {wape}."
        )
    if data.note:
        lines.append(data.note)
    return tuple(lines)
