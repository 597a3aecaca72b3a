"""One product's charts: identify, load, draw, and keep in the cache.

matplotlib is imported on the first drawing, not when the service starts.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

from sqlalchemy.orm import Session

from service.pricing.decision_schemas import DEFAULT_DECIDE_BY
from service.pricing.recommendations import move_spread_for
from service.ui import chartdata, chartdata_demand, chartdata_fit_time, chartdata_money, records
from service.ui.cache import ChartKey, SvgCache, chart_cache
from service.ui.chartdata import KINDS
from service.ui.records import ProductInfo

if TYPE_CHECKING:
    from service.ui.charts import Chart


def chart_key(session: Session, product: ProductInfo, kind: str) -> ChartKey:
    """What the chart is drawn from: cheap to find, so a 304 needs no drawing."""
    fit_id, recommendation_id = records.latest_ids(session, product.id)
    return ChartKey(
        sku=product.sku,
        kind=kind,
        fit_id=fit_id,
        recommendation_id=recommendation_id,
        product_stamp=product.stamp,
    )


def subject(session: Session, product: ProductInfo) -> chartdata.Subject:
    shown = records.shown_fit(session, product.id)
    recommendation = records.latest_recommendation(session, product.id)
    stored = recommendation.request if recommendation is not None else {}
    decide_by = str(stored.get("decide_by") or DEFAULT_DECIDE_BY)
    return chartdata.Subject(
        product=product,
        fit=shown,
        recommendation=recommendation,
        history=chartdata.load_history(session, product, shown),
        move_spread=move_spread_for(session, decide_by),
    )


def draw(subject: chartdata.Subject, kind: str) -> Chart:
    from service.ui import charts_demand, charts_fit_time, charts_money

    if kind == "demand":
        return charts_demand.demand_chart(chartdata_demand.demand_inputs(subject))
    if kind == "money":
        return charts_money.money_chart(chartdata_money.money_inputs(subject))
    return charts_fit_time.fit_time_chart(chartdata_fit_time.fit_time_inputs(subject))


def draw_all(subject: chartdata.Subject) -> dict[str, Chart]:
    return {kind: draw(subject, kind) for kind in KINDS}


@dataclass(frozen=True)
class Outline:
    """What a page says about a chart without drawing it: its title and summary, the ids
    of the marks it draws and its note (for the caption)."""

    title: str
    summary: tuple[str, ...]
    marks: tuple[str, ...]
    note: str | None


def outline(subject: chartdata.Subject, kind: str) -> Outline:
    """A chart's outline, from its inputs worked out once."""
    from service.ui import charts_demand, charts_fit_time, charts_money

    if kind == "demand":
        demand = chartdata_demand.demand_inputs(subject)
        text, marks, note = (
            charts_demand.demand_text(demand),
            charts_demand.demand_marks(demand),
            demand.note,
        )
    elif kind == "money":
        money = chartdata_money.money_inputs(subject)
        text, marks, note = (
            charts_money.money_text(money),
            charts_money.money_marks(money),
            money.note,
        )
    else:
        over_time = chartdata_fit_time.fit_time_inputs(subject)
        text, marks, note = (
            charts_fit_time.fit_time_text(over_time),
            charts_fit_time.fit_time_marks(over_time),
            over_time.note,
        )
    return Outline(text[0], text[1], marks, note)


def cached_svg(
    session: Session, product: ProductInfo, key: ChartKey, cache: SvgCache = chart_cache
) -> bytes:
    """The chart ``key`` names, drawn only when the cache does not hold it."""
    found = cache.get(key)
    if found is None:
        found = draw(subject(session, product), key.kind).svg
        cache.put(key, found)
    return found
