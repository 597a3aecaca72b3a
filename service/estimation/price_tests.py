"""Price tests: a plan of prices to charge for a while, from a product's latest usable fit,
with what it should teach (a narrower own-price interval) and cost (profit given up)."""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass
from typing import Any

from sqlalchemy import case, insert, select
from sqlalchemy.orm import Session

from models import PriceTestPlan, plan_price_test
from service.catalogue import products
from service.core.audit import write_audit
from service.core.errors import Conflict, ErrorItem, InvalidInput, library_errors
from service.core.tables import FitRow, ObservationRow, PriceTestRow, utcnow
from service.estimation import fits
from service.estimation.gates import ACTIVE, REJECTED


@dataclass(frozen=True)
class PlanTerms:
    """What the caller asked of a plan (bounds default to the product's)."""

    n_periods: int
    step: float
    centre_price: float | None
    min_price: float | None
    max_price: float | None
    covariates: dict[str, float]
    level: float
    first_period: dt.date | None = None


@dataclass(frozen=True)
class PlannedTest:
    sku: str
    currency: str
    fit_id: int
    fit_version: int
    fit_status: str
    plan: PriceTestPlan
    reasons: tuple[str, ...]
    product_id: int
    periods: tuple[dt.date, ...]


def plan_test(session: Session, *, sku: str, terms: PlanTerms) -> PlannedTest:
    """Plan a price test from the product's active fit, else its latest rejected fit (a
    test is most useful exactly when the gates rejected a fit for want of price variation
    or for a wrong-signed price effect)."""
    product = products.get_or_raise(session, sku=sku)
    row = session.scalar(
        select(FitRow)
        .where(FitRow.product_id == product.id, FitRow.status.in_((ACTIVE, REJECTED)))
        .order_by(case((FitRow.status == ACTIVE, 0), else_=1), FitRow.version.desc())
        .limit(1)
    )
    if row is None:
        raise fits.no_active_fit(session, product_id=product.id, sku=sku)
    fit = fits.restore(row)
    centre = terms.centre_price or product.current_price or fit.variable_latest.get("price")
    if centre is None or not centre > 0:
        raise InvalidInput(
            f"product {sku!r} has no current price to centre a test on; give centre_price"
        )
    low = terms.min_price if terms.min_price is not None else product.min_price
    high = terms.max_price if terms.max_price is not None else product.max_price
    if low is not None and high is not None and low >= high:
        raise InvalidInput(
            f"min_price {low:g} must lie below max_price {high:g}",
        )
    with library_errors(subject=f"a price test for {sku!r} cannot be planned", sku=sku):
        plan = plan_price_test(
            fit,
            centre_price=float(centre),
            n_periods=terms.n_periods,
            step=terms.step,
            min_price=low,
            max_price=high,
            unit_cost=product.unit_cost,
            covariates=terms.covariates,
            level=terms.level,
        )
    return PlannedTest(
        product_id=product.id,
        periods=_periods(session, product.id, terms.first_period, terms.n_periods),
        sku=sku,
        currency=product.currency,
        fit_id=row.id,
        fit_version=row.version,
        fit_status=row.status,
        plan=plan,
        reasons=_reasons(row, plan),
    )


def _reasons(row: FitRow, plan: PriceTestPlan) -> tuple[str, ...]:
    """Why a test may pay for this product, in plain sentences."""
    out = [
        f"the fit was rejected by {name}: {detail}" for name, detail in fits.rejected_by(row.gates)
    ]
    low, high = plan.elasticity_interval
    if low < -1 < high:
        out.append(
            f"the own-price elasticity's {plan.level:.0%} interval ({low:.2f} to {high:.2f}) "
            "holds both elastic and inelastic demand"
        )
    if high >= 0:
        out.append(f"the own-price elasticity's {plan.level:.0%} interval reaches zero or above")
    return tuple(out)


DEFAULT_SPACING = dt.timedelta(days=7)


def _periods(
    session: Session, product_id: int, first: dt.date | None, n: int
) -> tuple[dt.date, ...]:
    """The test's periods: from ``first`` (default: the period after the latest observed),
    spaced like the latest observations (a week when they cannot tell)."""
    latest = list(
        session.scalars(
            select(ObservationRow.period)
            .where(ObservationRow.product_id == product_id)
            .order_by(ObservationRow.period.desc())
            .limit(14)
        )
    )
    gaps = sorted(a - b for a, b in zip(latest, latest[1:], strict=False))
    spacing = gaps[len(gaps) // 2] if gaps else DEFAULT_SPACING
    if first is None:
        first = latest[0] + spacing if latest else dt.datetime.now(dt.UTC).date()
    return tuple(first + i * spacing for i in range(n))


@dataclass(frozen=True)
class StoredTest:
    id: int
    created_at: dt.datetime


def store(
    session: Session, *, planned: PlannedTest, answer: dict[str, Any], key_id: str | None
) -> StoredTest:
    """Store a plan (one at a time per stretch of periods: a plan whose periods overlap a
    stored one's is refused) and write the audit entry, in one transaction."""
    first, last = planned.periods[0], planned.periods[-1]
    overlapping = session.scalar(
        select(PriceTestRow.id).where(
            PriceTestRow.product_id == planned.product_id,
            PriceTestRow.first_period <= last,
            PriceTestRow.last_period >= first,
        )
    )
    if overlapping is not None:
        raise Conflict(
            f"product {planned.sku!r} already has a stored price test (id {overlapping}) over "
            f"some of the periods {first.isoformat()} to {last.isoformat()}; choose a later "
            "first_period",
            errors=[ErrorItem(field="first_period", message="overlaps a stored price test")],
        )
    now = utcnow()
    new_id = session.scalar(
        insert(PriceTestRow)
        .values(
            product_id=planned.product_id,
            fit_id=planned.fit_id,
            first_period=first,
            last_period=last,
            n_periods=len(planned.periods),
            plan=answer,
            created_by_key_id=key_id,
            created_at=now,
        )
        .returning(PriceTestRow.id)
    )
    assert new_id is not None, "INSERT ... RETURNING gives the new id"
    write_audit(
        session,
        actor_key_id=key_id,
        action="price_test.store",
        subject=planned.sku,
        details={
            "price_test_id": new_id,
            "first_period": first.isoformat(),
            "last_period": last.isoformat(),
            "prices": list(planned.plan.prices),
        },
        at=now,
    )
    return StoredTest(new_id, now)


def stored(session: Session, *, sku: str) -> list[PriceTestRow]:
    """A product's stored plans, newest first (at most 100)."""
    product = products.get_or_raise(session, sku=sku)
    return list(
        session.scalars(
            select(PriceTestRow)
            .where(PriceTestRow.product_id == product.id)
            .order_by(PriceTestRow.first_period.desc(), PriceTestRow.id.desc())
            .limit(100)
        )
    )
