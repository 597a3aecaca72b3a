"""Product queries: the only place that reads or writes the products table."""

from __future__ import annotations

from collections.abc import Iterable
from typing import Any

from sqlalchemy import delete, select
from sqlalchemy.orm import Session

from service.core.errors import ErrorItem, InvalidInput, NotFound
from service.core.tables import ProductRow, utcnow

DEFAULT_CURRENCY = "EUR"


def get(session: Session, *, sku: str) -> ProductRow | None:
    return session.scalar(select(ProductRow).where(ProductRow.sku == sku))


def get_or_raise(session: Session, *, sku: str) -> ProductRow:
    row = get(session, sku=sku)
    if row is None:
        raise NotFound(f"no product with sku {sku!r}")
    return row


def list_page(
    session: Session, *, family: str | None, limit: int, after_sku: str | None
) -> tuple[list[ProductRow], bool]:
    """One page ordered by sku, and whether more rows follow."""
    query = select(ProductRow).order_by(ProductRow.sku).limit(limit + 1)
    if family is not None:
        query = query.where(ProductRow.family == family)
    if after_sku is not None:
        query = query.where(ProductRow.sku > after_sku)
    rows = list(session.scalars(query))
    return rows[:limit], len(rows) > limit


def put(session: Session, *, sku: str, fields: dict[str, Any]) -> tuple[ProductRow, bool]:
    """Create or replace a product; returns the row and whether it was created."""
    row = get(session, sku=sku)
    created = row is None
    if row is None:
        row = ProductRow(sku=sku, created_at=utcnow())
        session.add(row)
    for name in (
        "name",
        "family",
        "currency",
        "unit_cost",
        "current_price",
        "min_price",
        "max_price",
        "default_spec",
    ):
        setattr(row, name, fields.get(name))
    row.currency = row.currency or DEFAULT_CURRENCY
    row.updated_at = utcnow()
    session.flush()
    return row, created


REQUIRED_FIELDS = ("name", "currency")


def update(session: Session, *, sku: str, changes: dict[str, Any]) -> ProductRow:
    """Apply a partial change; null clears optional fields and is refused for required ones."""
    row = get_or_raise(session, sku=sku)
    problems = [
        ErrorItem(field=name, message="cannot be cleared")
        for name in REQUIRED_FIELDS
        if name in changes and changes[name] is None
    ]
    for name, value in changes.items():
        setattr(row, name, value)
    if row.min_price is not None and row.max_price is not None and row.min_price > row.max_price:
        problems.append(ErrorItem(field="min_price", message="must not exceed max_price"))
    if problems:
        raise InvalidInput("the change would leave the product invalid", errors=problems)
    row.updated_at = utcnow()
    session.flush()
    return row


def delete_one(session: Session, *, sku: str) -> None:
    row = get_or_raise(session, sku=sku)
    session.execute(delete(ProductRow).where(ProductRow.id == row.id))


def ids_by_sku(session: Session, *, skus: Iterable[str] | None = None) -> dict[str, int]:
    query = select(ProductRow.sku, ProductRow.id)
    if skus is not None:
        query = query.where(ProductRow.sku.in_(list(skus)))
    return {sku: pid for sku, pid in session.execute(query)}


def create_bare(session: Session, *, skus: Iterable[str]) -> dict[str, int]:
    """Create minimal products (name = sku) for an import that may create unknown skus."""
    now = utcnow()
    rows = [
        ProductRow(sku=s, name=s, currency=DEFAULT_CURRENCY, created_at=now, updated_at=now)
        for s in skus
    ]
    session.add_all(rows)
    session.flush()
    return {r.sku: r.id for r in rows}
