"""The demand chart: past periods as points against price, the fitted curve and its band."""

from __future__ import annotations

from typing import Any

import numpy as np
from matplotlib.axes import Axes
from matplotlib.figure import Figure

from service.ui.chartdata_demand import DemandInputs
from service.ui.charts import (
    AMBER,
    BRICK,
    DEMAND_HEIGHT,
    INK,
    MUTED,
    PLUM,
    SAND,
    SLATE,
    TEAL,
    Chart,
    count,
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
from service.ui.words import plural

# The interval band's opacity over white: dark enough to differ in grey from the
# prices-seen band (tested in tests/service/ui/test_chart_drawing.py).
BAND_ALPHA = 0.34

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


@one_at_a_time("demand", demand_text)
def demand_chart(data: DemandInputs) -> Chart:
    title, summary = demand_text(data)
    if not data.groups and data.band is None:
        return placeholder("demand", title, data.note or "Nothing to show yet.", summary[1:])
    figure = demand_figure(data, title)
    return Chart("demand", title, summary, to_svg(figure, title, summary))


def _curve_parts(data: DemandInputs) -> dict[str, np.ndarray]:
    """The fitted curve's parts: inside the prices seen (solid) and beyond them (dashed)."""
    band = data.band
    if band is None:
        return {}
    low, high = data.observed_range or (band.price[0], band.price[-1])
    parts = {"demand-curve": (band.price >= low) & (band.price <= high)}
    below, above = band.price <= low, band.price >= high
    if below.sum() > 1:
        parts["demand-curve-below-range"] = below
    if above.sum() > 1:
        parts["demand-curve-above-range"] = above
    return {gid: mask for gid, mask in parts.items() if mask.any()}


def demand_marks(data: DemandInputs) -> tuple[str, ...]:
    """The ids of the marks the chart draws (for its caption and its tests)."""
    if not data.groups and data.band is None:
        return ("placeholder",)
    marks = ["observed-range"] if data.observed_range is not None else []
    marks += [f"weeks-{group.kind}" for group in data.groups]
    if data.band is not None:
        marks += ["demand-band", *_curve_parts(data)]
    if data.current_price is not None:
        marks.append("current-price")
    if data.recommended_price is not None:
        marks.append("recommended-price")
    return tuple(marks)


def demand_figure(data: DemandInputs, title: str) -> Figure:
    p = data.product
    figure = new_figure()
    ax = figure.add_subplot()
    style_axes(ax)
    heading(figure, title)
    drawn: list[np.ndarray] = [np.zeros(1)]
    if data.observed_range is not None:
        low, high = data.observed_range
        # Hatched as well as tinted, so it stays apart from the interval band in grey.
        ax.axvspan(
            low,
            high,
            facecolor=SAND,
            edgecolor=MUTED,
            hatch="..",
            linewidth=0,
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
        drawn.append(group.units)
    band = data.band
    if band is not None:
        # Darker than the prices-seen band, so the two differ in grey as well as in hue.
        ax.fill_between(
            band.price,
            band.low,
            band.high,
            color=TEAL,
            alpha=BAND_ALPHA,
            linewidth=0,
            zorder=1,
            gid="demand-band",
            label=f"{band.level:.0%} range for one {data.period}'s units",
        )
        drawn.append(band.high)
        beyond_label = "expected units beyond the prices seen"
        for gid, mask in _curve_parts(data).items():
            solid = gid == "demand-curve"
            ax.plot(
                band.price[mask],
                band.expected[mask],
                color=TEAL,
                linewidth=2.2 if solid else 1.6,
                linestyle="-" if solid else "--",
                zorder=4,
                gid=gid,
                label="expected units (fitted curve)" if solid else beyond_label,
            )
            if not solid:
                beyond_label = "_"  # one legend entry for both dashed parts
            drawn.append(band.expected[mask])
    _price_marks(ax, data.current_price, data.recommended_price)
    ax.set_xlabel(f"price ({p.currency})")
    ax.set_ylabel(f"units per {data.period}")
    ax.set_ylim(bottom=0)
    cover_with_ticks(ax, drawn)
    figure.subplots_adjust(left=0.09, right=0.98, top=plot_top(figure, data.note))
    legend_below(figure, [ax], columns=3, height=DEMAND_HEIGHT)
    return figure


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
    seen = sum(g.price.size for g in data.groups)
    if seen:
        prices = np.concatenate([g.price for g in data.groups])
        units = np.concatenate([g.units for g in data.groups])
        kinds = ", ".join(f"{g.price.size} {g.label}" for g in data.groups)
        lines.append(
            f"{plural(seen, 'past ' + data.period)} ({kinds}); prices {money(prices.min())} to "
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
                    f"({band.level:.0%} range for one {data.period} {count(band.low[i])} to "
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
