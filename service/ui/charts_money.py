"""The money chart: revenue and profit against price, with the rules and the best price."""

from __future__ import annotations

import numpy as np
from matplotlib.figure import Figure

from service.ui import words
from service.ui.chartdata_money import MoneyInputs
from service.ui.charts import (
    DEMAND_HEIGHT,
    INK,
    MUTED,
    PLUM,
    SAGE,
    SLATE,
    TEAL,
    Chart,
    cover_with_ticks,
    heading,
    legend_below,
    money,
    new_figure,
    one_at_a_time,
    placeholder,
    plot_top,
    style_axes,
    to_svg,
)


def money_text(data: MoneyInputs) -> tuple[str, tuple[str, ...]]:
    p = data.product
    return f"Revenue and profit of {p.sku} ({p.name}) against price", _money_summary(data)


@one_at_a_time("money", money_text)
def money_chart(data: MoneyInputs) -> Chart:
    title, summary = money_text(data)
    if not data.drawn:
        return placeholder("money", title, data.note or "No price can be weighed.", summary[1:])
    figure = money_figure(data, title)
    return Chart("money", title, summary, to_svg(figure, title, summary))


def _shows_unconstrained(data: MoneyInputs) -> bool:
    free, best = data.unconstrained_price, data.best_price
    if free is None or best is None or abs(free - best) <= 0.005 * abs(best):
        return False
    return float(data.price[0]) <= free <= float(data.price[-1])


def money_marks(data: MoneyInputs) -> tuple[str, ...]:
    """The ids of the marks the chart draws (for its caption and its tests)."""
    if not data.drawn:
        return ("placeholder",)
    marks = ["feasible-band"] if data.feasible is not None else []
    marks.append("revenue-curve")
    if data.profit is not None:
        marks.append("profit-curve")
    if data.best_price is not None and data.best_value is not None:
        marks.append("best-price")
    if data.current_price is not None:
        marks.append("current-price")
    if _shows_unconstrained(data):
        marks.append("unconstrained-price")
    if data.stored_price is not None:
        marks.append("stored-recommendation")
    if data.price_interval is not None:
        marks.append("price-interval")
    return tuple(marks)


def money_figure(data: MoneyInputs, title: str) -> Figure:
    p = data.product
    figure = new_figure()
    ax = figure.add_subplot()
    style_axes(ax)
    heading(figure, title)
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
    if free is not None and _shows_unconstrained(data):
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
    drawn = [data.revenue] + ([data.profit] if data.profit is not None else [])
    if data.best_value is not None:
        drawn.append(np.array([data.best_value]))
    if data.current_value is not None:
        drawn.append(np.array([data.current_value]))
    cover_with_ticks(ax, drawn)
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
    ax.set_ylabel(f"per {data.period} ({p.currency})")
    figure.subplots_adjust(left=0.1, right=0.98, top=plot_top(figure, data.note))
    legend_below(figure, [ax], columns=2, height=DEMAND_HEIGHT)
    return figure


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
