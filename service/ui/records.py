"""What the analyst pages read from storage: products, the fit they show, recommendations.

Reads only; every number is computed by `models` from these records.
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

from sqlalchemy import func, select
from sqlalchemy.orm import Session

from models import DemandFit
from service.catalogue import products
from service.core.audit import AuditEntry, AuditFilter, audit_page
from service.core.tables import FitRow, ProductRow, RecommendationRow, as_utc, utcnow
from service.estimation.fit_cache import fit_cache
from service.estimation.gates import ACTIVE
from service.pricing import price_record


@dataclass(frozen=True)
class ProductInfo:
    """A product's catalogue record, detached from the session."""

    id: int
    sku: str
    name: str
    family: str | None
    currency: str
    unit_cost: float | None
    current_price: float | None
    min_price: float | None
    max_price: float | None
    stamp: str  # changes whenever the record or its history changes

    @classmethod
    def of(cls, row: ProductRow) -> ProductInfo:
        changed = row.history_changed_at
        stamp = (
            as_utc(row.updated_at).isoformat()
            + "|"
            + (as_utc(changed).isoformat() if changed else "-")
        )
        return cls(
            id=row.id,
            sku=row.sku,
            name=row.name,
            family=row.family,
            currency=row.currency,
            unit_cost=row.unit_cost,
            current_price=row.current_price,
            min_price=row.min_price,
            max_price=row.max_price,
            stamp=stamp,
        )


@dataclass(frozen=True)
class ShownFit:
    """The fit a page shows: the active one, else the latest (rejected) one for diagnosis."""

    id: int
    version: int
    status: str
    created_at: dt.datetime
    gates: dict[str, Any]
    fit: DemandFit

    @property
    def active(self) -> bool:
        return self.status == ACTIVE


@dataclass(frozen=True)
class Recommendation:
    id: int
    fit_id: int | None
    objective: str
    created_at: dt.datetime
    request: dict[str, Any]
    result: dict[str, Any]
    state: str = "proposed"
    approved_price: float | None = None

    @classmethod
    def of(cls, row: RecommendationRow) -> Recommendation:
        return cls(
            id=row.id,
            fit_id=row.fit_id,
            objective=row.objective,
            created_at=as_utc(row.created_at),
            request=dict(row.request or {}),
            result=dict(row.result or {}),
            state=row.state,
            approved_price=row.approved_price,
        )

    @property
    def from_family(self) -> bool:
        return "family" in self.request


_FIT_COLUMNS = (
    FitRow.id,
    FitRow.product_id,
    FitRow.version,
    FitRow.status,
    FitRow.created_at,
    FitRow.gates,
)


def product(session: Session, sku: str) -> ProductInfo:
    return ProductInfo.of(products.get_or_raise(session, sku=sku))


def catalogue(session: Session, family: str | None = None) -> list[ProductInfo]:
    query = select(ProductRow).order_by(ProductRow.sku)
    if family is not None:
        query = query.where(ProductRow.family == family)
    return [ProductInfo.of(row) for row in session.scalars(query)]


def families(session: Session) -> list[str]:
    query = select(ProductRow.family).where(ProductRow.family.is_not(None)).distinct()
    return sorted(f for f in session.scalars(query) if f)


def shown_fits(session: Session, product_ids: Sequence[int]) -> dict[int, ShownFit]:
    """Per product: its active fit, else its newest fit; products without fits are absent."""
    if not product_ids:
        return {}
    ids = list(product_ids)
    chosen = {
        row.product_id: row
        for row in session.execute(
            select(*_FIT_COLUMNS).where(FitRow.product_id.in_(ids), FitRow.status == ACTIVE)
        )
    }
    missing = [i for i in ids if i not in chosen]
    if missing:
        newest = (
            select(FitRow.product_id, func.max(FitRow.version).label("version"))
            .where(FitRow.product_id.in_(missing))
            .group_by(FitRow.product_id)
            .subquery()
        )
        query = select(*_FIT_COLUMNS).join(
            newest,
            (newest.c.product_id == FitRow.product_id) & (newest.c.version == FitRow.version),
        )
        chosen.update({row.product_id: row for row in session.execute(query)})
    return {
        product_id: ShownFit(
            id=row.id,
            version=row.version,
            status=row.status,
            created_at=as_utc(row.created_at),
            gates=dict(row.gates or {}),
            fit=fit_cache.get(session, row.id, row.created_at),
        )
        for product_id, row in chosen.items()
    }


def shown_fit(session: Session, product_id: int) -> ShownFit | None:
    return shown_fits(session, [product_id]).get(product_id)


def latest_recommendations(
    session: Session, product_ids: Sequence[int]
) -> dict[int, Recommendation]:
    if not product_ids:
        return {}
    newest = (
        select(func.max(RecommendationRow.id))
        .where(RecommendationRow.product_id.in_(list(product_ids)))
        .group_by(RecommendationRow.product_id)
    )
    rows = session.scalars(select(RecommendationRow).where(RecommendationRow.id.in_(newest)))
    return {row.product_id: Recommendation.of(row) for row in rows}


def latest_recommendation(session: Session, product_id: int) -> Recommendation | None:
    return latest_recommendations(session, [product_id]).get(product_id)


def latest_ids(session: Session, product_id: int) -> tuple[int | None, int | None]:
    """Ids of the fit a chart shows and of the newest recommendation, without loading them."""
    fit_id = session.scalar(
        select(FitRow.id).where(FitRow.product_id == product_id, FitRow.status == ACTIVE)
    )
    if fit_id is None:
        fit_id = session.scalar(
            select(FitRow.id)
            .where(FitRow.product_id == product_id)
            .order_by(FitRow.version.desc())
            .limit(1)
        )
    recommendation_id = session.scalar(
        select(func.max(RecommendationRow.id)).where(RecommendationRow.product_id == product_id)
    )
    return fit_id, recommendation_id


@dataclass(frozen=True)
class FitVersion:
    id: int
    version: int
    status: str
    form: str
    n_obs: int
    holdout_wape: float | None
    own_price_estimate: float | None
    created_at: dt.datetime
    failed_gates: tuple[str, ...]


def fit_versions(session: Session, product_id: int, limit: int = 20) -> list[FitVersion]:
    rows = session.execute(
        select(
            FitRow.id,
            FitRow.version,
            FitRow.status,
            FitRow.form,
            FitRow.n_obs,
            FitRow.holdout_wape,
            FitRow.own_price_estimate,
            FitRow.created_at,
            FitRow.gates,
        )
        .where(FitRow.product_id == product_id)
        .order_by(FitRow.version.desc())
        .limit(limit)
    )
    return [
        FitVersion(
            id=row.id,
            version=row.version,
            status=row.status,
            form=row.form,
            n_obs=row.n_obs,
            holdout_wape=row.holdout_wape,
            own_price_estimate=row.own_price_estimate,
            created_at=as_utc(row.created_at),
            failed_gates=failed_gates(row.gates),
        )
        for row in rows
    ]


def failed_gates(gates: dict[str, Any] | None) -> tuple[str, ...]:
    checks = (gates or {}).get("checks") or []
    return tuple(str(c.get("name")) for c in checks if not c.get("passed"))


def recommendations(session: Session, product_id: int, limit: int = 20) -> list[Recommendation]:
    rows = session.scalars(
        select(RecommendationRow)
        .where(RecommendationRow.product_id == product_id)
        .order_by(RecommendationRow.id.desc())
        .limit(limit)
    )
    return [Recommendation.of(row) for row in rows]


@dataclass(frozen=True)
class PriceRecordView:
    """The product's price record as the product page shows it: newest first."""

    live_price: float | None
    prior_price: float | None
    entries: list[price_record.PriceEntry]
    changes: list[AuditEntry]


def price_record_view(session: Session, product_id: int, sku: str) -> PriceRecordView:
    """The price record (the newest 20 entries) and the newest 10 audit entries about the
    product."""
    now = utcnow()
    live = price_record.live_price(session, product_id, now)
    entries = price_record.entries(session, product_id)[::-1][:20]
    changes, _ = audit_page(session, AuditFilter(subject=sku), limit=10)
    return PriceRecordView(
        live_price=None if live is None else live.price,
        prior_price=price_record.prior_lowest_price(session, product_id, now),
        entries=entries,
        changes=changes,
    )
