"""Request and response bodies: the HTTP edge. Tables and domain results never leave the server."""

from __future__ import annotations

import datetime as dt
import re
from typing import Annotated, Any, Generic, Literal, TypeVar

from pydantic import (
    BaseModel,
    BeforeValidator,
    ConfigDict,
    Field,
    StringConstraints,
    model_validator,
)

# Query parameters take dates and times only as the OpenAPI formats name them: pydantic
# alone would also read a number as seconds since 1970, or a date as a date-time.
_ISO_DATE = re.compile(r"\d{4}-\d{2}-\d{2}")
_RFC3339 = re.compile(r"\d{4}-\d{2}-\d{2}[Tt]\d{2}:\d{2}:\d{2}(\.\d+)?([Zz]|[+-]\d{2}:\d{2})")


def _text_matching(pattern: re.Pattern[str], example: str) -> BeforeValidator:
    def check(value: object) -> object:
        if not isinstance(value, str) or not pattern.fullmatch(value):
            raise ValueError(f"expected text like {example}")
        return value

    return BeforeValidator(check)


DateText = Annotated[dt.date, _text_matching(_ISO_DATE, "2026-12-01")]
DateTimeText = Annotated[dt.datetime, _text_matching(_RFC3339, "2026-12-01T00:00:00Z")]

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


# ---------------------------------------------------------------- demand estimation


class FitRequest(Strict):
    spec: dict[str, Any] | None = Field(
        default=None,
        description="Model specification (form, covariates, log_covariates, cross_prices, "
        "seasonality, trend, standard_errors, instruments, window_periods, "
        "exclude_stockouts, pooling); omit to use the product's default_spec",
        examples=[
            {
                "form": "log-log",
                "covariates": ["rival_price", "promo"],
                "log_covariates": ["rival_price"],
            }
        ],
    )


class CoefficientOut(BaseModel):
    term: str
    estimate: float | None
    std_error: float | None
    t_stat: float | None
    p_value: float | None
    ci_low: float | None
    ci_high: float | None
    vif: float | None


class QualityOut(BaseModel):
    n_obs: int
    r_squared: float | None
    adj_r_squared: float | None
    f_stat: float | None
    f_p_value: float | None
    sigma: float | None
    aic: float | None
    bic: float | None
    holdout_wape: float | None


class DiagnosticsOut(BaseModel):
    condition_number: float | None
    durbin_watson: float | None
    breusch_pagan_p: float | None
    jarque_bera_p: float | None
    first_stage_f: float | None = None
    endogeneity_p: float | None = None


class WarningOut(BaseModel):
    code: str
    message: str


class GateOut(BaseModel):
    name: str
    passed: bool
    detail: str


class GatesOut(BaseModel):
    passed: bool
    checks: list[GateOut]


class WindowOut(BaseModel):
    first_period: str | None
    last_period: str | None
    n_obs: int
    n_window: int
    n_stockouts_excluded: int
    n_zero_units_dropped: int
    n_missing_dropped: int
    holdout_periods: int


class PooledOut(BaseModel):
    family: str
    raw: float | None
    raw_std_error: float | None
    pooled: float | None
    pooled_std_error: float | None
    family_mean: float | None
    between_variance: float | None
    weight_on_family: float | None
    n_products: int


FitStatus = Literal["active", "superseded", "rejected"]


class FitSummary(BaseModel):
    id: int
    sku: str
    version: int
    status: FitStatus
    form: str
    n_obs: int
    own_price_estimate: float | None
    holdout_wape: float | None
    created_at: dt.datetime


class FitOut(FitSummary):
    """A fit record: what `demand-model` returns for the active fit."""

    spec: dict[str, Any]
    equation: str
    coefficients: list[CoefficientOut]
    quality: QualityOut
    diagnostics: DiagnosticsOut
    warnings: list[WarningOut]
    gates: GatesOut
    window: WindowOut
    price_range: list[float]
    candidate_scores: dict[str, float | None] = Field(
        description="Rolling-origin hold-out WAPE of each candidate form (form `auto`)"
    )
    pooled: PooledOut | None


class ElasticityOut(BaseModel):
    name: str = Field(description="`price`, a covariate name or another product's sku")
    kind: Literal["own", "cross", "covariate"]
    value: float | None
    std_error: float | None
    ci_low: float | None
    ci_high: float | None
    class_: str | None = Field(
        alias="class",
        serialization_alias="class",
        description="elastic / inelastic / unit-elastic (own price); substitute / complement "
        "/ no clear relation (cross price); inferior / necessity / luxury (income-like)",
    )

    model_config = ConfigDict(populate_by_name=True)


class ElasticitiesOut(BaseModel):
    sku: str
    fit_id: int
    form: str
    at: str
    point: dict[str, float | None]
    level: float
    elasticities: list[ElasticityOut]
    pooled: PooledOut | None
    warnings: list[WarningOut]


class PredictRequest(Strict):
    price: PositiveMoney
    covariates: dict[CovariateName, FiniteNumber] = Field(
        default_factory=dict, description="Covariate values; others stay at the latest period's"
    )
    cross_prices: dict[Sku, PositiveMoney] = Field(
        default_factory=dict, description="Other products' prices; others stay at the latest"
    )
    unit_cost: Money | None = Field(
        default=None, description="For profit; default: the product's unit_cost"
    )
    level: Annotated[float, Field(strict=True, gt=0.5, lt=1.0)] = 0.95


class PredictionOut(BaseModel):
    sku: str
    fit_id: int
    form: str
    price: float
    expected_units: float | None
    interval_low: float | None
    interval_high: float | None
    level: float
    revenue: float | None
    profit: float | None
    unit_cost: float | None
    point: dict[str, float | None]
    warnings: list[WarningOut]


# ---------------------------------------------------------------- jobs and schedules

JobKind = Literal["refit", "reprice"]
JobStatus = Literal["queued", "running", "succeeded", "failed", "cancelled"]


class FamilyScope(Strict):
    family: Family


class SkusScope(Strict):
    skus: Annotated[list[Sku], Field(min_length=1, max_length=100_000)]


JobScope = Literal["all"] | FamilyScope | SkusScope


class JobIn(Strict):
    kind: JobKind
    scope: JobScope = Field(
        default="all", description='"all", {"family": "..."} or {"skus": ["...", ...]}'
    )
    force: bool = Field(
        default=False,
        description="refit: also products whose history has not changed since their latest fit",
    )
    spec: dict[str, Any] | None = Field(
        default=None, description="refit: one spec for every product (default: each product's)"
    )
    request: dict[str, Any] | None = Field(
        default=None,
        description="reprice: the optimal-price request body applied to every product",
    )


class JobProgress(BaseModel):
    done: int
    total: int


class JobCounts(BaseModel):
    activated: int = 0
    rejected: int = 0
    failed: int = 0
    skipped: int = 0
    recommended: int = 0


class JobError(BaseModel):
    sku: str
    reason: str


class JobOut(BaseModel):
    id: int
    kind: JobKind
    scope: Any = Field(description='"all", {"family": "..."} or {"skus": [...]}')
    force: bool
    status: JobStatus
    progress: JobProgress
    counts: JobCounts
    errors: list[JobError]
    message: str | None
    schedule: str | None = Field(description="The schedule that started the job, if any")
    created_at: dt.datetime
    started_at: dt.datetime | None
    finished_at: dt.datetime | None


class ScheduleIn(Strict):
    cron: Annotated[str, StringConstraints(min_length=9, max_length=100)] = Field(
        description="Five-field cron expression, e.g. `30 2 * * *` (02:30 every day)"
    )
    timezone: Annotated[str, StringConstraints(min_length=1, max_length=64)] = "UTC"
    job: JobIn
    enabled: bool = True


class ScheduleOut(BaseModel):
    name: str
    cron: str
    timezone: str
    job: JobIn
    enabled: bool
    next_run_at: dt.datetime | None
    last_run_at: dt.datetime | None = Field(description="The slot of the latest run")
    last_job_id: int | None
    created_at: dt.datetime
    updated_at: dt.datetime


# ---------------------------------------------------------------- price optimisation

Objective = Literal["profit", "revenue"]
Percent = Annotated[float, Field(strict=True, ge=0, allow_inf_nan=False)]


class ConstraintsIn(Strict):
    """Business rules for a recommended price; product defaults fill min/max price."""

    min_price: PositiveMoney | None = None
    max_price: PositiveMoney | None = None
    max_change_pct: Percent | None = Field(
        default=None, description="Largest move from the current price, in percent"
    )
    min_margin_pct: Annotated[float, Field(strict=True, lt=100, allow_inf_nan=False)] | None = (
        Field(default=None, description="Lowest (price - unit cost) / price, in percent")
    )
    price_step: PositiveMoney | None = Field(
        default=None, description="Allowed prices are multiples of this, e.g. 0.05"
    )
    price_endings: list[Annotated[float, Field(strict=True, ge=0, lt=1)]] = Field(
        default_factory=list, description="Allowed cent endings, e.g. [0.49, 0.99]"
    )
    max_units: Money | None = Field(
        default=None, description="Stock that can be sold in the period"
    )
    min_units: Money | None = None
    allow_extrapolation: bool = Field(
        default=False,
        description="Allow prices beyond the observed range widened by 10% (always warned)",
    )


ScenarioValue = Annotated[float, Field(strict=True, allow_inf_nan=False)]


class OptimalPriceRequest(Strict):
    objective: Objective = "profit"
    constraints: ConstraintsIn = Field(default_factory=ConstraintsIn)
    scenario: dict[Annotated[str, StringConstraints(pattern=NAME_PATTERN)], ScenarioValue] = Field(
        default_factory=dict,
        description="Covariate values and other products' prices (by sku); the rest "
        "stay at the latest fitted period's values",
    )
    unit_cost: Money | None = Field(default=None, description="Default: the product's")
    current_price: PositiveMoney | None = Field(
        default=None, description="Default: the product's, else the latest observed price"
    )
    uncertainty_draws: Annotated[int, Field(strict=True, ge=0, le=2000)] = 0
    seed: Annotated[int, Field(strict=True, ge=0)] = 0
    curve_points: Annotated[int, Field(strict=True, ge=0, le=200)] = Field(
        default=0, description="0 for no curve, else 50 to 200 points for plotting"
    )
    force: bool = Field(
        default=False, description="Optimise even when the own-price effect has the wrong sign"
    )

    @model_validator(mode="after")
    def _curve_size(self) -> OptimalPriceRequest:
        if 0 < self.curve_points < 50:
            raise ValueError("curve_points must be 0 or between 50 and 200")
        return self


class PricePointOut(BaseModel):
    price: float | None
    units: float | None
    revenue: float | None
    profit: float | None
    margin_pct: float | None


class RangeOut(BaseModel):
    low: float | None
    high: float | None


class UncertaintyOut(BaseModel):
    draws: int
    level: float
    price_interval: list[float | None] | None
    profit_interval: list[float | None] | None
    revenue_interval: list[float | None] | None
    prob_better_than_current: float | None
    n_used: int
    n_wrong_sign: int
    n_infeasible: int
    n_unbounded: int


class CurvePointOut(BaseModel):
    price: float | None
    units: float | None
    revenue: float | None
    profit: float | None
    feasible: bool


class RecommendationOut(BaseModel):
    """A recommended price: estimates from past data, for a person to approve."""

    id: int
    sku: str
    fit_id: int | None
    created_at: dt.datetime
    form: str
    objective: Objective
    unit_cost: float | None
    current: PricePointOut | None
    recommended: PricePointOut
    change_pct: float | None
    unconstrained_price: float | None = Field(
        description="The best price with no business rule (null when there is none)"
    )
    binding_constraints: list[str]
    feasible_range: RangeOut | None
    uncertainty: UncertaintyOut | None
    warnings: list[WarningOut]
    curve: list[CurvePointOut] | None = None
    scenario: dict[str, Any]
    method: str
    success: bool
    status: int
    message: str
    nit: int


class FamilyPriceRequest(Strict):
    objective: Objective = "profit"
    constraints: ConstraintsIn = Field(
        default_factory=ConstraintsIn, description="Rules for every product of the family"
    )
    product_constraints: dict[Sku, ConstraintsIn] = Field(
        default_factory=dict, description="Rules for one product, replacing the shared ones"
    )
    order: list[Annotated[list[Sku], Field(min_length=2, max_length=2)]] = Field(
        default_factory=list, description="Price ladder: [a, b] means price(a) <= price(b)"
    )
    max_total_change_pct: Percent | None = Field(
        default=None, description="Cap on the move of the family's unit-weighted price index"
    )
    scenario: dict[str, Any] = Field(
        default_factory=dict,
        description="Shared covariate values, or {sku: {name: value}} for one product",
    )
    uncertainty_draws: Annotated[int, Field(strict=True, ge=0, le=1000)] = 0
    seed: Annotated[int, Field(strict=True, ge=0)] = 0
    force: bool = False


class FamilyTotalFigures(BaseModel):
    units: float | None
    revenue: float | None
    profit: float | None


class FamilyTotalOut(BaseModel):
    current: FamilyTotalFigures | None
    recommended: FamilyTotalFigures
    objective_change_pct: float | None
    price_index_change_pct: float | None
    profit_interval: list[float | None] | None
    revenue_interval: list[float | None] | None
    prob_better_than_current: float | None


class ExcludedProduct(BaseModel):
    sku: str
    reason: str


class FamilyRecommendationOut(BaseModel):
    family: str
    objective: Objective
    products: list[RecommendationOut]
    total: FamilyTotalOut
    order: list[list[str]]
    max_total_change_pct: float | None
    binding_constraints: list[str]
    warnings: list[WarningOut]
    excluded: list[ExcludedProduct] = Field(
        description="Family products left out (no active fit), with the reason"
    )
    method: str
    success: bool
    status: int
    message: str
    nit: int
