"""How the analyst view's charts are laid out: notes above the plot, no empty residual
panel, captions that name only drawn marks, the hold-out fit's own forecasts, bands that
stay apart in grey, and value axes whose ticks reach past the data.

The charts are drawn from the invented tea shop (models.generate_catalogue, seed 7) and
fits made here, without a database: what is checked is the drawing.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import math
from collections.abc import Iterator

import numpy as np
import pytest
from matplotlib.axes import Axes
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.colors import to_rgba
from matplotlib.figure import Figure
from matplotlib.transforms import Bbox

import models
from service.estimation.gates import ACTIVE, REJECTED
from service.ui import (
    chartbook,
    chartdata_demand,
    chartdata_fit_time,
    chartdata_money,
    charts,
    charts_demand,
    charts_fit_time,
    charts_money,
    pages,
)
from service.ui.chartdata import Subject
from service.ui.records import ProductInfo, ShownFit
from tests.plugins.ui_pages import gids, parse

CATALOGUE = models.generate_catalogue(7)
SPEC = models.ModelSpec(covariates=models.COVARIATES, log_covariates=models.LOG_COVARIATES)
# The demo's wrong-sign trap, fitted without the instrument that repairs it.
NAIVE = models.ModelSpec(
    form="log-log", covariates=models.COVARIATES, log_covariates=models.LOG_COVARIATES
)


def _product(sku: str, current_price: float | None = 16.0) -> ProductInfo:
    return ProductInfo(
        id=1,
        sku=sku,
        name=f"Tea {sku}",
        family="green",
        currency="EUR",
        unit_cost=6.0,
        current_price=current_price,
        min_price=None,
        max_price=None,
        stamp="test",
    )


def _subject(sku: str, *, status: str | None = ACTIVE, spec: models.ModelSpec = SPEC) -> Subject:
    history = CATALOGUE.product(sku).history
    shown = None
    if status is not None:
        shown = ShownFit(
            id=1,
            version=1,
            status=status,
            created_at=dt.datetime(2026, 1, 5, tzinfo=dt.UTC),
            gates={},
            fit=models.fit_demand(history, spec),
        )
    current = float(np.nanmedian(history.price))
    return Subject(product=_product(sku, current), fit=shown, recommendation=None, history=history)


SUBJECTS = {
    "fitted": lambda: _subject("TEA-004"),
    "rejected": lambda: _subject("TEA-001", status=REJECTED, spec=NAIVE),
    "unfitted": lambda: _subject("TEA-005", status=None),
}


def _figure(subject: Subject, kind: str) -> Figure | None:
    """The drawn figure of a chart, None for a placeholder."""
    if kind == "demand":
        demand = chartdata_demand.demand_inputs(subject)
        if charts_demand.demand_marks(demand) == ("placeholder",):
            return None
        return charts_demand.demand_figure(demand, "demand")
    if kind == "money":
        money = chartdata_money.money_inputs(subject)
        if charts_money.money_marks(money) == ("placeholder",):
            return None
        return charts_money.money_figure(money, "money")
    over_time = chartdata_fit_time.fit_time_inputs(subject)
    if charts_fit_time.fit_time_marks(over_time) == ("placeholder",):
        return None
    return charts_fit_time.fit_time_figure(over_time, "fit over time")


def _rendered(figure: Figure) -> FigureCanvasAgg:
    canvas = FigureCanvasAgg(figure)
    canvas.draw()
    return canvas


def _by_gid(figure: Figure, gid: str) -> Iterator[object]:
    for artist in figure.findobj():
        if artist.get_gid() == gid:
            yield artist


KINDS = ("demand", "money", "fit-over-time")
# A product without a usable fit gets no money chart: its placeholder says why.
PLACEHOLDERS = {("rejected", "money"), ("unfitted", "money")}


def _drawn(*cases: str) -> list[tuple[str, str]]:
    return [(c, k) for c in cases for k in KINDS if (c, k) not in PLACEHOLDERS]


@pytest.mark.parametrize(("case", "kind"), sorted(PLACEHOLDERS))
def test_no_money_chart_without_a_usable_fit(case: str, kind: str) -> None:
    assert _figure(SUBJECTS[case](), kind) is None


@pytest.mark.parametrize(("case", "kind"), _drawn("rejected", "unfitted"))
def test_a_note_sits_between_the_heading_and_the_plot(case: str, kind: str) -> None:
    # The note on rejected and unfitted products once covered the current price's label
    # and line: now no part of it may overlap a plot area.
    subject = SUBJECTS[case]()
    figure = _figure(subject, kind)
    assert figure is not None
    [note] = _by_gid(figure, "chart-note")
    renderer = _rendered(figure).get_renderer()
    box = note.get_bbox_patch().get_window_extent(renderer)  # type: ignore[attr-defined]
    [heading] = _by_gid(figure, "chart-heading")
    assert box.y1 <= heading.get_window_extent(renderer).y0 + 1  # type: ignore[attr-defined]
    for ax in figure.axes:
        assert not box.overlaps(ax.get_window_extent(renderer)), kind
    for gid in ("current-price", "current-price-label"):
        for mark in _by_gid(figure, gid):
            extent = mark.get_window_extent(renderer)  # type: ignore[attr-defined]
            assert not Bbox.intersection(box, extent), (kind, gid)


def test_an_unfitted_history_draws_no_residual_panel() -> None:
    unfitted = _figure(SUBJECTS["unfitted"](), "fit-over-time")
    assert unfitted is not None and len(unfitted.axes) == 1
    assert unfitted.axes[0].get_xlabel() == "week starting"
    assert "residual" not in [ax.get_ylabel() for ax in unfitted.axes]
    fitted = _figure(SUBJECTS["fitted"](), "fit-over-time")
    assert fitted is not None and [ax.get_ylabel() for ax in fitted.axes] == [
        "units per week",
        "residual",
    ]


@pytest.mark.parametrize("case", ["fitted", "rejected", "unfitted", "no history"])
@pytest.mark.parametrize("kind", ["demand", "money", "fit-over-time"])
def test_a_caption_names_only_marks_its_chart_draws(case: str, kind: str) -> None:
    if case == "no history":
        subject = Subject(product=_product("TEA-099"), fit=None, recommendation=None, history=None)
    else:
        subject = SUBJECTS[case]()
    told = chartbook.outline(subject, kind)
    marks = told.marks
    reading = pages.chart_reading(marks, told.note, kind, "week")
    drawn = gids(parse(chartbook.draw(subject, kind).svg))
    for names, sentence in pages.READINGS[kind]:
        if sentence.format(period="week") in reading:
            assert any(
                gid == name or (name.endswith("-") and gid.startswith(name))
                for gid in drawn
                for name in names
            ), (sentence, sorted(drawn))
    if "placeholder" in drawn:
        assert reading.startswith("No chart is drawn: "), reading
    else:
        assert reading and not reading.startswith("No chart"), reading
    # Every mark the chart says it draws is in the SVG.
    assert set(marks) - {"placeholder"} <= drawn | {"placeholder"}


def test_the_hold_out_shows_the_forecast_of_the_fit_made_without_it() -> None:
    subject = SUBJECTS["fitted"]()
    assert subject.fit is not None and subject.history is not None
    fit, history = subject.fit.fit, subject.history
    inputs = chartdata_fit_time.fit_time_inputs(subject)
    figure = charts_fit_time.fit_time_figure(inputs, "fit over time")
    [forecast] = _by_gid(figure, "holdout-forecast")
    [full] = _by_gid(figure, "fitted-units")
    start = float(inputs.holdout_start.astype("datetime64[D]").astype(np.int64))  # type: ignore[union-attr]
    forecast_days = np.asarray(forecast.get_xdata(), dtype=float)  # type: ignore[attr-defined]
    full_days = np.asarray(full.get_xdata(), dtype=float)  # type: ignore[attr-defined]
    # The full fit's line stops where the hold-out starts; the forecast covers it.
    assert full_days.max() < start <= forecast_days.min()
    assert forecast_days.size == fit.window.holdout_periods
    # These are the forecasts the stored hold-out WAPE scored: WAPE = sum |actual - forecast|
    # / sum |actual| (the usual definition, e.g. Hyndman and Athanasopoulos, Forecasting:
    # Principles and Practice, 3rd ed., section 5.8; from memory).
    held = np.isfinite(inputs.holdout_fitted)  # type: ignore[arg-type]
    actual = history.units[held]
    predicted = np.asarray(forecast.get_ydata(), dtype=float)  # type: ignore[attr-defined]
    wape = np.abs(actual - predicted).sum() / np.abs(actual).sum()
    assert fit.quality.holdout_wape is not None
    assert wape == pytest.approx(fit.quality.holdout_wape, rel=1e-9)
    # ... and not the full fit's values there, which saw those weeks.
    assert not np.allclose(predicted, inputs.fitted[held])  # type: ignore[index]


def _grey_over_white(color: object, alpha: float | None = None) -> float:
    """Luma of a colour laid over white (ITU-R BT.601 weights 0.299, 0.587, 0.114)."""
    r, g, b, a = to_rgba(color)
    a = a if alpha is None else alpha
    r, g, b = (a * c + (1.0 - a) for c in (r, g, b))
    return 0.299 * r + 0.587 * g + 0.114 * b


def test_the_prices_seen_and_the_interval_bands_differ_in_grey() -> None:
    figure = _figure(SUBJECTS["fitted"](), "demand")
    assert figure is not None
    [seen] = _by_gid(figure, "observed-range")
    [band] = _by_gid(figure, "demand-band")
    seen_grey = _grey_over_white(seen.get_facecolor())  # type: ignore[attr-defined]
    band_grey = _grey_over_white(band.get_facecolor()[0])  # type: ignore[attr-defined]
    # Lightness apart by a tenth of the scale (common practice, no source), and a pattern.
    assert abs(seen_grey - band_grey) >= 0.1, (seen_grey, band_grey)
    assert seen.get_hatch()  # type: ignore[attr-defined]


def _visible_ticks(ax: Axes) -> list[float]:
    low, high = ax.get_ylim()
    return [t for t in ax.get_yticks() if low - 1e-9 * (high - low) <= t <= high]


@pytest.mark.parametrize(("case", "kind"), _drawn("fitted", "rejected", "unfitted"))
def test_value_axes_reach_past_the_data(case: str, kind: str) -> None:
    figure = _figure(SUBJECTS[case](), kind)
    assert figure is not None
    _rendered(figure)
    for ax in figure.axes:
        ticks = _visible_ticks(ax)
        for line in ax.get_lines():
            y = np.asarray(line.get_ydata(), dtype=float)
            y = y[np.isfinite(y)]
            if line.get_gid() and y.size:
                assert ticks[0] <= y.min() and y.max() <= ticks[-1], (line.get_gid(), ticks)


def test_cover_with_ticks_moves_the_top_tick_past_the_data() -> None:
    # The defect: a revenue line peaking at 1,040 under a top tick of 1,000.
    figure = Figure()
    ax = figure.add_subplot()
    charts.style_axes(ax)
    ax.plot([0.0, 1.0], [0.0, 1040.0])
    ax.set_ylim(0.0, 1092.0)
    assert max(_visible_ticks(ax)) < 1040.0  # the premise: the data run past the ticks
    charts.cover_with_ticks(ax, [np.array([0.0, 1040.0])])
    ticks = _visible_ticks(ax)
    assert ticks[-1] >= 1040.0 and math.isclose(ax.get_ylim()[1], ticks[-1])


def test_charts_of_monthly_data_say_month_not_week() -> None:
    # The same sales re-dated a month apart: every chart's words follow the history's
    # detected period (#15: monthly or daily data must not be labelled "week").
    weekly = _subject("TEA-004")
    assert weekly.history is not None
    n = weekly.history.n_periods
    months = np.array(
        [np.datetime64(f"{2015 + i // 12}-{i % 12 + 1:02d}-01", "D") for i in range(n)]
    )
    monthly = Subject(
        product=weekly.product,
        fit=weekly.fit,
        recommendation=None,
        history=dataclasses.replace(weekly.history, periods=months),
    )
    over_time = chartdata_fit_time.fit_time_inputs(monthly)
    demand = chartdata_demand.demand_inputs(monthly)
    assert over_time.period == demand.period == "month"
    figure = charts_fit_time.fit_time_figure(over_time, "fit over time")
    assert figure.axes[0].get_ylabel() == "units per month"
    assert charts_demand.demand_figure(demand, "demand").axes[0].get_ylabel() == "units per month"
    money = chartdata_money.money_inputs(monthly)
    assert charts_money.money_figure(money, "money").axes[0].get_ylabel() == "per month (EUR)"
    texts = (charts_fit_time.fit_time_text(over_time), charts_demand.demand_text(demand))
    words = " ".join(title + " " + " ".join(lines) for title, lines in texts)
    assert "week" not in words and "month" in words
