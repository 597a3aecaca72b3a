"""Price tests: a plan of prices to charge for a while, from a product's latest usable fit,
with what it should teach (a narrower own-price interval) and cost (profit given up)."""

from __future__ import annotations

from dataclasses import dataclass

from sqlalchemy import case, select
from sqlalchemy.orm import Session

from models import PriceTestPlan, plan_price_test
from service.catalogue import products
from service.core.errors import InvalidInput, library_errors
from service.core.tables import FitRow
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


@dataclass(frozen=True)
class PlannedTest:
    sku: str
    currency: str
    fit_id: int
    fit_version: int
    fit_status: str
    plan: PriceTestPlan
    reasons: tuple[str, ...]


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
