"""Fit records of a product: the active fit, versions, fitting a product now, and
pooling a product's estimate with its family's."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from sqlalchemy import and_, bindparam, select
from sqlalchemy.orm import Session

from models import DemandFit, ModelSpec, fit_demand, fit_many, pool_family
from service.catalogue import products
from service.core import metrics
from service.core.errors import ErrorItem, NoActiveFit, NotFound, library_errors
from service.core.settings import Settings
from service.core.tables import FitRow, ProductRow
from service.estimation import fit_store, histories
from service.estimation.fit_cache import fit_cache
from service.estimation.fit_review import AWAITING_REVIEW
from service.estimation.gates import ACTIVE, REJECTED


def active_row(session: Session, *, product_id: int) -> FitRow | None:
    return session.scalar(
        select(FitRow).where(FitRow.product_id == product_id, FitRow.status == ACTIVE)
    )


def active_or_raise(session: Session, *, product: ProductRow) -> FitRow:
    row = active_row(session, product_id=product.id)
    if row is None:
        raise no_active_fit(session, product_id=product.id, sku=product.sku)
    return row


@dataclass(frozen=True)
class PricingTerms:
    """What pricing needs of a product row (read without building an ORM object)."""

    id: int
    sku: str
    unit_cost: float | None
    current_price: float | None
    min_price: float | None
    max_price: float | None
    currency: str


_PRODUCT_WITH_ACTIVE_FIT = (
    select(
        ProductRow.id,
        ProductRow.sku,
        ProductRow.unit_cost,
        ProductRow.current_price,
        ProductRow.min_price,
        ProductRow.max_price,
        ProductRow.currency,
        FitRow.id.label("fit_id"),
        FitRow.created_at.label("fit_created_at"),
    )
    .outerjoin(FitRow, and_(FitRow.product_id == ProductRow.id, FitRow.status == ACTIVE))
    .where(ProductRow.sku == bindparam("sku"))
)


def product_with_active_fit(session: Session, sku: str) -> tuple[PricingTerms, int, DemandFit]:
    """A product's pricing terms, its active fit's id and the fit, read with one query
    (the hot path of every recommendation)."""
    found = session.connection().execute(_PRODUCT_WITH_ACTIVE_FIT, {"sku": sku}).first()
    if found is None:
        raise NotFound(f"no product with sku {sku!r}")
    product = PricingTerms(
        id=found.id,
        sku=found.sku,
        unit_cost=found.unit_cost,
        current_price=found.current_price,
        min_price=found.min_price,
        max_price=found.max_price,
        currency=found.currency,
    )
    if found.fit_id is None:
        raise no_active_fit(session, product_id=product.id, sku=product.sku)
    return product, found.fit_id, fit_cache.get(session, found.fit_id, found.fit_created_at)


def no_active_fit(session: Session, *, product_id: int, sku: str) -> NoActiveFit:
    """Why a product has no fit that pricing may use, and what may help: never fitted,
    or its latest fit was rejected (by which quality gates, and why)."""
    latest = session.execute(
        select(FitRow.id, FitRow.version, FitRow.status, FitRow.gates)
        .where(FitRow.product_id == product_id)
        .order_by(FitRow.version.desc())
        .limit(1)
    ).first()
    fit_path = f"/v1/products/{sku}/fits"
    if latest is not None and latest.status == AWAITING_REVIEW:
        return NoActiveFit(
            f"product {sku!r} has no active fit: its latest fit (version {latest.version}) "
            "awaits a person's review; a key with the approve scope can activate it with POST "
            f"{fit_path}/{latest.id}/activate"
        )
    if latest is None or latest.status != REJECTED:
        return NoActiveFit(f"product {sku!r} has no active fit; fit one with POST {fit_path}")
    failed = rejected_by(latest.gates)
    names = ", ".join(name for name, _ in failed) or "a quality gate"
    remedies = [REMEDIES[name].format(sku=sku) for name, _ in failed if name in REMEDIES]
    remedies.append(f"fit again with a different spec (POST {fit_path} with a spec)")
    remedies.append(
        "or, if a person judges the fit usable despite the gates, activate it with a reason "
        f"(POST {fit_path}/{latest.id}/activate, approve scope)"
        + (", then price it with allow_wrong_sign" if "wrong_sign" in dict(failed) else "")
    )
    return NoActiveFit(
        f"product {sku!r} has no active fit: its latest fit (version {latest.version}) was "
        f"rejected by the quality gate{'s' if len(failed) > 1 else ''} {names}. "
        f"What may help: {'; '.join(remedies)}. The fit and its gates: GET "
        f"{fit_path}/{latest.id}",
        errors=[ErrorItem(message=f"{name}: {detail}") for name, detail in failed],
    )


def rejected_by(gates: dict[str, Any] | None) -> list[tuple[str, str]]:
    """The failed gates of a stored gate record, as (name, detail) pairs."""
    checks = (gates or {}).get("checks") or []
    return [
        (str(c.get("name")), str(c.get("detail")))
        for c in checks
        if isinstance(c, dict) and not c.get("passed", True)
    ]


# What a user can do about each gate a fit failed (said in the 404 of pricing and answers).
REMEDIES = {
    "wrong_sign": "charge a wider spread of prices for a while so the price effect shows "
    "(POST /v1/products/{sku}/price-tests plans one), or add the covariates that move with "
    "price, such as promotions",
    "price_variation": "charge a wider spread of prices for a while (POST "
    "/v1/products/{sku}/price-tests plans one)",
    "enough_observations": "send more observations (POST /v1/products/{sku}/observations)",
}


def active_fit(session: Session, product: ProductRow) -> tuple[int, DemandFit]:
    """The active fit's id and the fit itself (restored once, then cached)."""
    found = session.execute(
        select(FitRow.id, FitRow.created_at).where(
            FitRow.product_id == product.id, FitRow.status == ACTIVE
        )
    ).first()
    if found is None:
        raise no_active_fit(session, product_id=product.id, sku=product.sku)
    return found.id, fit_cache.get(session, found.id, found.created_at)


def get_or_raise(session: Session, *, sku: str, fit_id: int) -> FitRow:
    """A fit version of the product, or why there is none (no such product, or no such fit)."""
    row = session.scalar(
        select(FitRow)
        .join(ProductRow, ProductRow.id == FitRow.product_id)
        .where(FitRow.id == fit_id, ProductRow.sku == sku)
    )
    if row is None:
        products.get_or_raise(session, sku=sku)
        raise NotFound(f"product {sku!r} has no fit {fit_id}")
    return row


def list_page(
    session: Session, *, product_id: int, limit: int, before_version: int | None
) -> tuple[list[FitRow], bool]:
    """Newest first."""
    query = (
        select(FitRow)
        .where(FitRow.product_id == product_id)
        .order_by(FitRow.version.desc())
        .limit(limit + 1)
    )
    if before_version is not None:
        query = query.where(FitRow.version < before_version)
    rows = list(session.scalars(query))
    return rows[:limit], len(rows) > limit


def restore(row: FitRow) -> DemandFit:
    return DemandFit.from_dict(row.result)


def parse_spec(raw: dict[str, Any] | None, *, field_prefix: str = "spec") -> ModelSpec:
    """A model specification from its JSON form; problems name their field."""
    with library_errors(spec_field=field_prefix):
        return ModelSpec.from_dict(raw or {})


def fit_product(
    session: Session, *, sku: str, spec: dict[str, Any] | None, settings: Settings
) -> FitRow:
    """Fit one product with the given spec (or its default), record the fit and
    activate it if it passes the gates: the use case behind ``POST .../fits``."""
    product = products.get_or_raise(session, sku=sku)
    model_spec = parse_spec(spec if spec is not None else product.default_spec)
    history = histories.load_history(session, product=product, cross_skus=model_spec.cross_prices)
    cannot = f"the history of {sku!r} cannot be fitted in the {model_spec.form} form"
    with library_errors(
        subject=cannot, sku=sku, gate_min_observations=settings.gate_min_observations
    ):
        active = active_row(session, product_id=product.id)
        fit = fit_demand(history, model_spec, previous_form=active.form if active else None)
        if model_spec.pooling == "family" and product.family:
            fit = pool_with_family(session, product=product, fit=fit, spec=model_spec)
    (outcome,) = fit_store.activate(
        session, targets=[fit_store.FitTarget(product.id, sku)], results=[fit], settings=settings
    )
    metrics.record_fit(outcome.outcome)
    row = session.scalar(
        select(FitRow).where(FitRow.product_id == product.id, FitRow.version == outcome.version)
    )
    assert row is not None, "a fit record just written"
    return row


def pool_with_family(
    session: Session, *, product: ProductRow, fit: DemandFit, spec: ModelSpec
) -> DemandFit:
    """Shrink the fit's own-price elasticity toward its family's.

    Siblings contribute their active fits; a sibling without one is fitted for the
    occasion with the same spec minus cross-price terms (those fits are not stored).
    """
    siblings = list(
        session.scalars(
            select(ProductRow).where(
                ProductRow.family == product.family, ProductRow.id != product.id
            )
        )
    )
    members: list[DemandFit] = [fit]
    to_fit = []
    for sibling in siblings:
        active = active_row(session, product_id=sibling.id)
        if active is not None:
            members.append(restore(active))
        else:
            to_fit.append(histories.load_history(session, product=sibling))
    if to_fit:
        plain = ModelSpec.from_dict({**spec.to_dict(), "cross_prices": [], "pooling": "none"})
        members += [f for f in fit_many(to_fit, plain) if isinstance(f, DemandFit)]
    family = product.family or ""
    pooled = pool_family(members, families={m.sku: family for m in members})
    return pooled[0]
