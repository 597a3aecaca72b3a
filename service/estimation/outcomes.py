"""Watching outcomes: realised units against what the active fit expected, after a stored
recommendation, and the drift check over the misses (``models.drift_check``).

A drift flag suggests a refit (``POST /v1/products/{sku}/fits``); it triggers nothing: a
person decides, since a refit that absorbs a shift also changes the prices that follow.
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass

import numpy as np
from sqlalchemy import func, select
from sqlalchemy.orm import Session

from models import DemandFit, DriftCheck, ExpectedOutcomes, drift_check, expected_outcomes
from service.catalogue import products
from service.core import metrics
from service.core.errors import NoActiveFit, NotFound, ServiceError, library_errors
from service.core.tables import ObservationRow, ProductRow, RecommendationRow
from service.estimation import fits, histories

LEVEL = 0.95
"""The prediction intervals' level; the drift check allows ``1 - LEVEL`` of periods outside."""


@dataclass(frozen=True)
class Watched:
    """One product's outcomes since its first stored recommendation (and after its fit)."""

    sku: str
    family: str | None
    fit_id: int
    watched_from: dt.date | None
    outcomes: ExpectedOutcomes | None
    in_stock: tuple[bool, ...]
    prices: tuple[float, ...]
    drift: DriftCheck | None

    @property
    def n_periods(self) -> int:
        return 0 if self.outcomes is None else len(self.outcomes.periods)

    def counted(self) -> np.ndarray:
        """Periods that count toward errors and drift: in stock, with an expectation."""
        if self.outcomes is None:
            return np.zeros(0, dtype=bool)
        finite = np.isfinite(self.outcomes.expected) & np.isfinite(self.outcomes.low)
        return np.asarray(finite & np.array(self.in_stock, dtype=bool))

    def absolute_error(self) -> float:
        if self.outcomes is None:
            return 0.0
        use = self.counted()
        return float(np.sum(np.abs(self.outcomes.realised[use] - self.outcomes.expected[use])))

    def realised_total(self) -> float:
        if self.outcomes is None:
            return 0.0
        return float(np.sum(np.abs(self.outcomes.realised[self.counted()])))

    @property
    def wape(self) -> float | None:
        total = self.realised_total()
        return self.absolute_error() / total if total > 0 else None


def watch(session: Session, *, sku: str) -> Watched:
    """A product's outcomes and drift state; 404 without an active fit (saying why)."""
    product = products.get_or_raise(session, sku=sku)
    fit_id, fit = fits.active_fit(session, product)
    watched = _watch(session, product, fit_id, fit)
    if watched.drift is not None:
        metrics.record_drift_check(sku, watched.drift.flagged)
    return watched


def watch_family(session: Session, *, family: str) -> tuple[list[Watched], list[tuple[str, str]]]:
    """Every product of a family: those with an active fit watched, the others with why not
    (one product without a fit never fails the family)."""
    members = list(
        session.scalars(
            select(ProductRow).where(ProductRow.family == family).order_by(ProductRow.sku)
        )
    )
    if not members:
        raise NotFound(f"no family {family!r}: no product has it")
    watched, skipped = [], []
    for product in members:
        try:
            fit_id, fit = fits.active_fit(session, product)
            one = _watch(session, product, fit_id, fit)
        except (NoActiveFit, NotFound) as exc:  # the product's own reason, not the family's
            skipped.append((product.sku, exc.detail))
            continue
        if one.drift is not None:
            metrics.record_drift_check(one.sku, one.drift.flagged)
        watched.append(one)
    return watched, skipped


def drifting(session: Session, product_ids: list[int]) -> dict[int, bool]:
    """Whether each given product with an active fit and a stored recommendation has its
    drift flag up (the analyst view's catalogue). A product whose outcomes cannot be read is
    left out; it never fails the others."""
    first_recommended = (
        select(
            RecommendationRow.product_id.label("product_id"),
            func.min(RecommendationRow.created_at).label("since"),
        )
        .where(RecommendationRow.product_id.in_(product_ids))
        .group_by(RecommendationRow.product_id)
        .subquery()
    )
    latest_period = (
        select(
            ObservationRow.product_id.label("product_id"),
            func.max(ObservationRow.period).label("last"),
        )
        .where(ObservationRow.product_id.in_(product_ids))
        .group_by(ObservationRow.product_id)
        .subquery()
    )
    # Only products with periods after their first recommendation have anything to check.
    candidates = [
        (r.product_id, r.since, r.last)
        for r in session.execute(
            select(
                first_recommended.c.product_id, first_recommended.c.since, latest_period.c.last
            ).join(latest_period, latest_period.c.product_id == first_recommended.c.product_id)
        )
    ]
    watched = [pid for pid, since, last in candidates if last > _day(since)]
    if not watched:
        return {}
    rows = session.scalars(select(ProductRow).where(ProductRow.id.in_(watched)))
    out: dict[int, bool] = {}
    for product in rows:
        try:
            fit_id, fit = fits.active_fit(session, product)
            one = _watch(session, product, fit_id, fit)
        except ServiceError:
            continue
        if one.drift is not None:
            metrics.record_drift_check(product.sku, one.drift.flagged)
            out[product.id] = one.drift.flagged
    return out


def _watch(session: Session, product: ProductRow, fit_id: int, fit: DemandFit) -> Watched:
    first = session.scalar(
        select(func.min(RecommendationRow.created_at)).where(
            RecommendationRow.product_id == product.id
        )
    )
    if first is None:
        return Watched(product.sku, product.family, fit_id, None, None, (), (), None)
    recommended_on = _day(first)
    fitted_until = dt.date.fromisoformat(fit.window.last_period)
    after = max(recommended_on, fitted_until)
    history = histories.load_history(session, product=product, cross_skus=fit.spec.cross_prices)
    with library_errors(subject=f"the outcomes of {product.sku!r} cannot be read", sku=product.sku):
        seen = expected_outcomes(fit, history, after=after.isoformat(), level=LEVEL)
    at = np.searchsorted(history.periods, np.array(seen.periods, dtype="datetime64[D]"))
    in_stock = tuple(bool(x) for x in history.in_stock[at])
    prices = tuple(float(x) for x in history.price[at])
    watched = Watched(product.sku, product.family, fit_id, after, seen, in_stock, prices, None)
    use = watched.counted()
    check = drift_check(~seen.inside[use], allowed_rate=1 - LEVEL)
    return Watched(product.sku, product.family, fit_id, after, seen, in_stock, prices, check)


def _day(moment: dt.datetime | dt.date) -> dt.date:
    """The UTC date of a stored time (SQLite gives back naive UTC datetimes)."""
    if isinstance(moment, dt.datetime):
        return (moment if moment.tzinfo is None else moment.astimezone(dt.UTC)).date()
    return moment
