"""Request and response bodies of products, observations and imports."""

from __future__ import annotations

import datetime as dt
from typing import Annotated, Any

from pydantic import (
    BaseModel,
    Field,
    StringConstraints,
    model_validator,
)

from service.core.bounds import MAX_COVARIATES_PER_OBSERVATION
from service.core.schemas import (
    CovariateName,
    Currency,
    Family,
    FiniteNumber,
    Money,
    Period,
    PositiveMoney,
    Strict,
)
from service.core.tables import (
    ObservationRow,
    ProductRow,
    as_utc,
)


class _PriceBounds(Strict):
    @model_validator(mode="after")
    def _bounds_in_order(self) -> _PriceBounds:
        low, high = getattr(self, "min_price", None), getattr(self, "max_price", None)
        if low is not None and high is not None and low > high:
            raise ValueError("min_price must not exceed max_price")
        return self


class ProductIn(_PriceBounds):
    """A whole product, as sent with PUT (create or replace)."""

    name: Annotated[str, StringConstraints(min_length=1, max_length=200)]
    family: Family | None = None
    currency: Currency = "EUR"
    unit_cost: Money | None = None
    current_price: PositiveMoney | None = None
    min_price: PositiveMoney | None = None
    max_price: PositiveMoney | None = None
    default_spec: dict[str, Any] | None = Field(
        default=None, description="The model specification used when a fit request omits one"
    )


class ProductPatch(_PriceBounds):
    """Fields to change; omitted fields keep their value, null clears an optional one."""

    name: Annotated[str, StringConstraints(min_length=1, max_length=200)] | None = None
    family: Family | None = None
    currency: Currency | None = None
    unit_cost: Money | None = None
    current_price: PositiveMoney | None = None
    min_price: PositiveMoney | None = None
    max_price: PositiveMoney | None = None
    default_spec: dict[str, Any] | None = None


class ProductOut(BaseModel):
    sku: str
    name: str
    family: str | None
    currency: str
    unit_cost: float | None
    current_price: float | None
    min_price: float | None
    max_price: float | None
    default_spec: dict[str, Any] | None
    created_at: dt.datetime
    updated_at: dt.datetime
    live_price: float | None = Field(
        default=None,
        description="The approved price live now, from the price record (null if none yet, "
        "and in lists)",
    )
    prior_price: float | None = Field(
        default=None,
        description="The lowest price live in the 30 days before now, from the price record: "
        "the prior price to show beside a reduction under article 6a of the EU Price "
        "Indication Directive 98/6/EC (null if none, and in lists)",
    )
    price_changed_at: dt.datetime | None = Field(
        default=None, description="When the live price last changed (null if never, and in lists)"
    )


class ObservationIn(Strict):
    period: Period
    price: PositiveMoney
    units: Annotated[float, Field(strict=True, ge=0, allow_inf_nan=False)]
    unit_cost: Money | None = None
    in_stock: bool | None = Field(
        default=None, strict=True, description="False if the product ran out during the period"
    )
    covariates: dict[CovariateName, FiniteNumber] = Field(
        default_factory=dict,
        max_length=MAX_COVARIATES_PER_OBSERVATION,
        description=f"At most {MAX_COVARIATES_PER_OBSERVATION} named numbers",
    )


class ObservationBatch(Strict):
    observations: Annotated[list[ObservationIn], Field(min_length=1, max_length=10_000)]


class ObservationOut(BaseModel):
    period: dt.date
    price: float
    units: float
    unit_cost: float | None
    in_stock: bool | None
    covariates: dict[str, float]
    price_test_id: int | None = Field(
        default=None,
        description="The stored price test whose periods include this one (a test period)",
    )


class UpsertCounts(BaseModel):
    rows: int = Field(description="Rows received")
    inserted: int = Field(description="Periods that were new")
    updated: int = Field(description="Periods that existed and were replaced")


class ImportResult(UpsertCounts):
    products_created: list[str] = Field(description="Skus created by this import")


# -- rows to responses


def product_out(row: ProductRow) -> ProductOut:
    return ProductOut(
        sku=row.sku,
        name=row.name,
        family=row.family,
        currency=row.currency,
        unit_cost=row.unit_cost,
        current_price=row.current_price,
        min_price=row.min_price,
        max_price=row.max_price,
        default_spec=row.default_spec,
        created_at=as_utc(row.created_at),
        updated_at=as_utc(row.updated_at),
    )


def observation_out(row: ObservationRow) -> ObservationOut:
    return ObservationOut(
        period=row.period,
        price=row.price,
        units=row.units,
        unit_cost=row.unit_cost,
        in_stock=row.in_stock,
        covariates=dict(row.covariates or {}),
    )
