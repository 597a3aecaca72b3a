"""Request and response bodies: the HTTP edge. Tables and domain results never leave the server."""

from __future__ import annotations

import datetime as dt
from typing import Annotated, Any, Generic, Literal, TypeVar

from pydantic import BaseModel, ConfigDict, Field, StringConstraints, model_validator

SKU_PATTERN = r"^[A-Za-z0-9][A-Za-z0-9._-]{0,63}$"
NAME_PATTERN = r"^[A-Za-z_][A-Za-z0-9_.-]{0,63}$"

Sku = Annotated[str, StringConstraints(pattern=SKU_PATTERN)]
Family = Annotated[str, StringConstraints(pattern=SKU_PATTERN)]
CovariateName = Annotated[str, StringConstraints(pattern=NAME_PATTERN)]
Money = Annotated[float, Field(strict=True, ge=0, allow_inf_nan=False)]
PositiveMoney = Annotated[float, Field(strict=True, gt=0, allow_inf_nan=False)]
Currency = Annotated[str, StringConstraints(pattern=r"^[A-Z]{3}$")]
FiniteNumber = Annotated[float, Field(strict=True, allow_inf_nan=False)]

T = TypeVar("T")


class Strict(BaseModel):
    """Bodies refuse unknown fields; numeric fields refuse strings and booleans."""

    model_config = ConfigDict(extra="forbid")


class Page(BaseModel, Generic[T]):
    items: list[T]
    next_cursor: str | None = Field(
        description="Pass as `cursor` to get the next page; null on the last page"
    )


class ProblemItem(BaseModel):
    message: str
    field: str | None = None
    line: int | None = Field(default=None, description="CSV line number (the header is line 1)")
    column: str | None = None


class Problem(BaseModel):
    """An RFC 9457 problem document (media type application/problem+json)."""

    type: str
    title: str
    status: int
    detail: str
    instance: str | None = None
    errors: list[ProblemItem] | None = None


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


class ObservationIn(Strict):
    period: dt.date = Field(description="ISO date of the period's first day")
    price: PositiveMoney
    units: Annotated[float, Field(strict=True, ge=0, allow_inf_nan=False)]
    unit_cost: Money | None = None
    in_stock: bool | None = Field(
        default=None, strict=True, description="False if the product ran out during the period"
    )
    covariates: dict[CovariateName, FiniteNumber] = Field(default_factory=dict)


class ObservationBatch(Strict):
    observations: Annotated[list[ObservationIn], Field(min_length=1, max_length=10_000)]


class ObservationOut(BaseModel):
    period: dt.date
    price: float
    units: float
    unit_cost: float | None
    in_stock: bool | None
    covariates: dict[str, float]


class UpsertCounts(BaseModel):
    rows: int = Field(description="Rows received")
    inserted: int = Field(description="Periods that were new")
    updated: int = Field(description="Periods that existed and were replaced")


class ImportResult(UpsertCounts):
    products_created: list[str] = Field(description="Skus created by this import")


Scope = Literal["read", "write", "admin"]


class ApiKeyIn(Strict):
    name: Annotated[str, StringConstraints(min_length=1, max_length=100)]
    scopes: Annotated[list[Scope], Field(min_length=1)]


class ApiKeyOut(BaseModel):
    id: str
    name: str
    scopes: list[str]
    created_at: dt.datetime
    last_used_at: dt.datetime | None
    revoked_at: dt.datetime | None


class ApiKeyCreated(ApiKeyOut):
    secret: str = Field(description="The full key; shown only in this response")


class Health(BaseModel):
    status: Literal["ok"]


class Readiness(BaseModel):
    status: Literal["ready", "not ready"]
    database: Literal["reachable", "unreachable"]
    schema_revision: str | None
    expected_revision: str | None
