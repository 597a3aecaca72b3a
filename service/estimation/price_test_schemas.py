"""Request and response bodies of price tests."""

from __future__ import annotations

import datetime as dt
from typing import Annotated

from pydantic import BaseModel, Field, StrictBool

from service.core.schemas import CovariateName, FiniteNumber, Period, PositiveMoney, Strict
from service.estimation.price_tests import PlannedTest

DESIGN = (
    "The price alternates between the high and the low price, one period each, starting "
    "high: a few percent either side of the centre price, within the bounds. Alternating "
    "keeps the test's prices nearly uncorrelated with slow drivers (season, trend, rival "
    "prices), so the new variation teaches the own-price effect. Run no promotions during "
    "the test, or send them as covariates."
)


class PriceTestRequest(Strict):
    periods: Annotated[int, Field(strict=True, ge=2, le=52)] = Field(
        default=12, description="How many periods the test runs"
    )
    step_pct: Annotated[float, Field(strict=True, gt=0, le=30, allow_inf_nan=False)] = Field(
        default=10.0, description="How far either side of the centre price, in percent"
    )
    centre_price: PositiveMoney | None = Field(
        default=None, description="Default: the product's current price, else the latest observed"
    )
    min_price: PositiveMoney | None = Field(default=None, description="Default: the product's")
    max_price: PositiveMoney | None = Field(default=None, description="Default: the product's")
    covariates: dict[CovariateName, FiniteNumber] = Field(
        default_factory=dict,
        description="Covariate values expected during the test (others stay at the latest "
        "fitted period's values)",
    )
    level: Annotated[float, Field(strict=True, gt=0, lt=1)] = 0.95
    first_period: Period | None = Field(
        default=None,
        description="The test's first period (default: the period after the latest observed); "
        "the others follow at the spacing of the latest observations",
    )
    store: StrictBool = Field(
        default=False,
        description="Store the plan (needs the `write` scope): observations sent for its "
        "periods are then marked as its test periods. By default nothing is stored",
    )


class PlannedPeriodOut(BaseModel):
    index: int = Field(description="1 for the test's first period, and so on")
    period: dt.date
    price: float
    expected_units: float


class PriceTestOut(BaseModel):
    id: int | None = Field(description="The stored plan's id; null when not stored")
    created_at: dt.datetime | None = Field(description="When it was stored; null when not")
    sku: str
    currency: str
    fit_id: int
    fit_version: int
    fit_status: str = Field(
        description="`active`, or `rejected` when the product has no active fit"
    )
    design: str
    reasons: list[str] = Field(description="Why a test may pay for this product")
    centre_price: float
    low_price: float
    high_price: float
    periods: list[PlannedPeriodOut]
    level: float
    elasticity: float = Field(description="Own-price elasticity at the centre price")
    elasticity_interval: tuple[float, float]
    expected_elasticity_interval: tuple[float, float] = Field(
        description="The interval expected after refitting with the test's periods"
    )
    std_error: float = Field(description="Standard error of the own-price coefficient now")
    expected_std_error: float
    narrowing: float = Field(
        description="expected_std_error / std_error: the factor the interval is expected to "
        "shrink by"
    )
    revenue_given_up: float = Field(
        description="Revenue at the centre price less revenue at the test's prices, summed "
        "over the test (negative: a gain)"
    )
    profit_given_up: float | None = Field(
        description="The same for profit (null without a unit cost)"
    )
    profit_given_up_upper: float | None = Field(
        description="A high figure for profit_given_up: its upper_level quantile over the "
        "own-price coefficient's estimated distribution"
    )
    upper_level: float


def price_test_out(planned: PlannedTest) -> PriceTestOut:
    plan = planned.plan
    units = plan.expected_units
    return PriceTestOut(
        id=None,
        created_at=None,
        sku=planned.sku,
        currency=planned.currency,
        fit_id=planned.fit_id,
        fit_version=planned.fit_version,
        fit_status=planned.fit_status,
        design=DESIGN,
        reasons=list(planned.reasons),
        centre_price=plan.centre_price,
        low_price=plan.low_price,
        high_price=plan.high_price,
        periods=[
            PlannedPeriodOut(index=i + 1, period=d, price=p, expected_units=q)
            for i, (d, p, q) in enumerate(zip(planned.periods, plan.prices, units, strict=True))
        ],
        level=plan.level,
        elasticity=plan.elasticity,
        elasticity_interval=plan.elasticity_interval,
        expected_elasticity_interval=plan.expected_elasticity_interval,
        std_error=plan.std_error,
        expected_std_error=plan.expected_std_error,
        narrowing=plan.narrowing,
        revenue_given_up=plan.revenue_given_up,
        profit_given_up=plan.profit_given_up,
        profit_given_up_upper=plan.profit_given_up_upper,
        upper_level=plan.upper_level,
    )


class StoredPriceTests(BaseModel):
    items: list[PriceTestOut] = Field(description="Newest first (at most 100)")
