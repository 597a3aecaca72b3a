"""The price record: every live price of a product, from when, set by whom, from which
recommendation and fit.

An entry is the live price from its ``effective_from`` until the next entry of the same
product starts (its ``effective_to``, None while it is the newest), so a product has at
most one live price at any moment; a correction is a new entry, never a change. All
times are compared in UTC: an aware time in any zone is converted, a naive one is taken
as UTC.

The prior price (:func:`prior_lowest_price`) is the lowest price charged in the window of
``days`` (30) days before a moment, as article 6a of the EU Price Indication Directive
98/6/EC (inserted by Directive (EU) 2019/2161) asks a shop to show beside a price
reduction. The window is ``[at - days, at)`` in absolute time: a price that started
exactly at the window's start counts, one that stopped exactly there does not, and a
price starting exactly at ``at`` is not a prior price.
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass
from typing import Any

from sqlalchemy import func, insert, select
from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import Session

from service.core.errors import Conflict, ErrorItem, NotFound
from service.core.tables import PriceEntryRow, ProductRow, as_utc, to_utc, utcnow

PRIOR_PRICE_DAYS = 30


@dataclass(frozen=True)
class PriceEntry:
    """One live price with its span."""

    id: int
    product_id: int
    price: float
    effective_from: dt.datetime
    effective_to: dt.datetime | None
    set_by_key_id: str | None
    policy_id: int | None
    recommendation_id: int | None
    fit_id: int | None
    note: str | None
    created_at: dt.datetime


def _entry(row: PriceEntryRow, effective_to: dt.datetime | None) -> PriceEntry:
    return PriceEntry(
        id=row.id,
        product_id=row.product_id,
        price=row.price,
        effective_from=as_utc(row.effective_from),
        effective_to=None if effective_to is None else as_utc(effective_to),
        set_by_key_id=row.set_by_key_id,
        policy_id=row.policy_id,
        recommendation_id=row.recommendation_id,
        fit_id=row.fit_id,
        note=row.note,
        created_at=as_utc(row.created_at),
    )


def entries(session: Session, product_id: int) -> list[PriceEntry]:
    """The product's whole price record, oldest first, each entry with its span."""
    rows = list(
        session.scalars(
            select(PriceEntryRow)
            .where(PriceEntryRow.product_id == product_id)
            .order_by(PriceEntryRow.effective_from)
        )
    )
    ends: list[dt.datetime | None] = [r.effective_from for r in rows[1:]]
    if rows:
        ends.append(None)
    return [_entry(row, end) for row, end in zip(rows, ends, strict=True)]


def live_price(session: Session, product_id: int, at: dt.datetime) -> PriceEntry | None:
    """The entry live at ``at``: the latest that started at or before it."""
    moment = to_utc(at)
    row = session.scalar(
        select(PriceEntryRow)
        .where(PriceEntryRow.product_id == product_id, PriceEntryRow.effective_from <= moment)
        .order_by(PriceEntryRow.effective_from.desc())
        .limit(1)
    )
    if row is None:
        return None
    following = session.scalar(
        select(func.min(PriceEntryRow.effective_from)).where(
            PriceEntryRow.product_id == product_id, PriceEntryRow.effective_from > moment
        )
    )
    return _entry(row, following)


def last_change(session: Session, product_id: int, at: dt.datetime) -> dt.datetime | None:
    """When the live price last changed at or before ``at`` (None: no price yet)."""
    found = session.scalar(
        select(func.max(PriceEntryRow.effective_from)).where(
            PriceEntryRow.product_id == product_id, PriceEntryRow.effective_from <= to_utc(at)
        )
    )
    return None if found is None else as_utc(found)


def prior_lowest_price(
    session: Session, product_id: int, at: dt.datetime, days: int = PRIOR_PRICE_DAYS
) -> float | None:
    """The lowest price live at any moment of ``[at - days, at)``; None if no entry was."""
    end = to_utc(at)
    start = end - dt.timedelta(days=days)
    live_at_start = live_price(session, product_id, start)
    started_within = session.scalar(
        select(func.min(PriceEntryRow.price)).where(
            PriceEntryRow.product_id == product_id,
            PriceEntryRow.effective_from > start,
            PriceEntryRow.effective_from < end,
        )
    )
    candidates = [p for p in (started_within,) if p is not None]
    if live_at_start is not None:
        candidates.append(live_at_start.price)
    return min(candidates) if candidates else None


def add_entry(
    session: Session,
    *,
    product_id: int,
    price: float,
    effective_from: dt.datetime,
    set_by_key_id: str | None,
    policy_id: int | None = None,
    recommendation_id: int | None = None,
    fit_id: int | None = None,
    note: str | None = None,
) -> PriceEntry:
    """Add a live price from ``effective_from``. The product's row is locked first (on
    PostgreSQL), so entries for one product are added one at a time; a start earlier than
    the newest entry's, or equal to it, is refused: the record is only ever extended."""
    start = to_utc(effective_from)
    locked = session.execute(
        select(ProductRow.id).where(ProductRow.id == product_id).with_for_update()
    ).first()
    if locked is None:
        raise NotFound("the product was deleted before its price could be recorded")
    newest = session.scalar(
        select(func.max(PriceEntryRow.effective_from)).where(PriceEntryRow.product_id == product_id)
    )
    if newest is not None and start <= as_utc(newest):
        raise Conflict(
            f"the price record already has a live price from {as_utc(newest).isoformat()}; "
            "a new price must start after it (the record is extended, never rewritten)",
            errors=[ErrorItem(field="effective_at", message="must be after the newest entry")],
        )
    try:
        with session.begin_nested():
            new_id = session.scalar(
                insert(PriceEntryRow)
                .values(
                    product_id=product_id,
                    price=price,
                    effective_from=start,
                    set_by_key_id=set_by_key_id,
                    policy_id=policy_id,
                    recommendation_id=recommendation_id,
                    fit_id=fit_id,
                    note=note,
                    created_at=utcnow(),
                )
                .returning(PriceEntryRow.id)
            )
    except IntegrityError:
        raise Conflict(
            "another price for this product starts at the same moment; try again"
        ) from None
    row = session.get_one(PriceEntryRow, new_id)
    return _entry(row, None)


def with_prior_price(session: Session, product_id: int, result: dict[str, Any]) -> dict[str, Any]:
    """A result that lowers the price carries the prior price: the lowest price live in
    the 30 days before now in the product's price record (see
    :func:`prior_lowest_price`)."""
    current = (result.get("current") or {}).get("price")
    recommended = (result.get("recommended") or {}).get("price")
    lowers = current is not None and recommended is not None and recommended < current
    prior = prior_lowest_price(session, product_id, utcnow()) if lowers else None
    return {**result, "prior_price": prior}
