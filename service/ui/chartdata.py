"""What a product's charts are drawn from: the product, its shown fit and history.

The numbers each chart plots are computed with `models` in one module a kind
(:mod:`service.ui.chartdata_demand`, :mod:`service.ui.chartdata_money`,
:mod:`service.ui.chartdata_fit_time`); nothing there draws, the ``charts_*`` modules turn
their records into SVG. Each builder returns a record whose ``note`` says in words why
something is missing (no fit, a rejected fit, a refusal to price), so a chart can always
be drawn.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from sqlalchemy.orm import Session

from models import DemandFit, History
from service.core.errors import InvalidInput
from service.core.tables import ProductRow
from service.estimation import histories
from service.ui.records import ProductInfo, Recommendation, ShownFit
from service.ui.words import period_word

KINDS = ("demand", "money", "fit-over-time")
PROMO_COVARIATE = "promo"
"""A covariate of this name above zero marks a promotion period (the demo's convention)."""
DRAWN_PRICE_FACTOR = 4.0
"""A current or recommended price further than this factor from the prices the fit saw is
named in the chart's note instead of drawn (the axis would squeeze the curves flat) and, in
the money chart, the latest period's price stands in for it."""


@dataclass(frozen=True)
class Subject:
    """Everything a chart of one product may need."""

    product: ProductInfo
    fit: ShownFit | None
    recommendation: Recommendation | None
    history: History | None
    # The catalogue's spread of moves, when the money chart prices with ``calibrated``.
    move_spread: float | None = None


def load_history(session: Session, product: ProductInfo, fit: ShownFit | None) -> History | None:
    """The stored history with the fit's cross prices aligned; None without observations."""
    row = session.get(ProductRow, product.id)
    if row is None:
        return None
    cross = fit.fit.spec.cross_prices if fit is not None else ()
    try:
        history = histories.load_history(session, product=row, cross_skus=cross)
    except InvalidInput:  # a sibling named by the spec is gone: plot without its prices
        history = histories.load_history(session, product=row)
    return history if history.n_periods else None


def period_of(history: History | None) -> str:
    """The word for one period of the history (day, week, month...), or "period": charts
    of monthly or daily data must not say "week"."""
    if history is None or history.n_periods < 2:
        return "period"
    return period_word(str(history.periods[0]), str(history.periods[-1]), history.n_periods)


def near_seen_prices(fit: DemandFit, price: float | None) -> bool:
    """Whether a price lies within :data:`DRAWN_PRICE_FACTOR` of the prices the fit saw."""
    low, high = fit.price_range
    return (
        price is not None
        and math.isfinite(price)
        and low / DRAWN_PRICE_FACTOR <= price <= high * DRAWN_PRICE_FACTOR
    )


def fit_label(shown: ShownFit) -> str:
    state = "active" if shown.active else "rejected"
    return f"fit version {shown.version} ({shown.fit.form}, {state})"


def recommended_price(recommendation: Recommendation | None) -> float | None:
    if recommendation is None:
        return None
    value = (recommendation.result.get("recommended") or {}).get("price")
    return float(value) if isinstance(value, (int, float)) and math.isfinite(value) else None
