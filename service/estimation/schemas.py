"""Request and response bodies of fits, elasticities and predictions."""

from __future__ import annotations

import datetime as dt
import math
from typing import TYPE_CHECKING, Annotated, Any, Literal

from pydantic import (
    BaseModel,
    ConfigDict,
    Field,
)

from service.core.schemas import CovariateName, FiniteNumber, Money, PositiveMoney, Sku, Strict
from service.core.tables import (
    FitRow,
    as_utc,
)
from service.estimation.fit_review import review_step

if TYPE_CHECKING:
    from models import ElasticityRow
    from service.estimation.shrinkage import ShrunkFit


class FitRequest(Strict):
    spec: dict[str, Any] | None = Field(
        default=None,
        description="Model specification (form, covariates, log_covariates, cross_prices, "
        "seasonality, trend, standard_errors (classical, hc0, hc1, hc2, hc3, hac), "
        "instruments, log_instruments, window_periods, exclude_stockouts, pooling); omit to "
        "use the product's default_spec. Instruments enter in levels unless named in "
        "log_instruments",
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


class DecisionOut(BaseModel):
    """A person's decision to make this fit active (absent when the gates decided)."""

    by_key_id: str | None
    at: str
    reason: str | None
    status_before: str = Field(description="The fit's status before it was activated")


class GatesOut(BaseModel):
    passed: bool
    checks: list[GateOut]
    undecided: list[str] = Field(
        default_factory=list,
        description="Gates that left the decision to a person (the hold-out gate, when the "
        "spec identifies the price effect differently from the active fit's)",
    )
    decision: DecisionOut | None = None


class WindowOut(BaseModel):
    first_period: str | None
    last_period: str | None
    n_obs: int
    n_window: int
    n_stockouts_excluded: int
    n_zero_units_dropped: int
    n_missing_dropped: int
    holdout_periods: int
    n_window_excluded: int = Field(
        default=0,
        description="Older periods of the history left out because the window keeps only the "
        "latest `window_periods` (0 when the window held the whole history)",
    )
    window_excluded_from: str | None = Field(
        default=None,
        description="The first (oldest) period left out by the window, or null",
    )


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


FitStatus = Literal["active", "superseded", "rejected", "awaiting_review"]


class FitSummary(BaseModel):
    id: int
    sku: str
    version: int
    status: FitStatus
    form: str
    n_obs: int
    own_price_estimate: float | None = Field(
        description="The own-price coefficient of the fitted equation. It is the own-price "
        "elasticity only in the log-log and poisson forms; in linear fits it is units per "
        "unit of price, in semi-log fits the proportional change in units per unit of price. "
        "Use the elasticities endpoint for elasticities in every form."
    )
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
    review: str | None = Field(
        default=None,
        description="What a person must do when the quality gates did not decide "
        "(status `awaiting_review`); null otherwise",
    )


class ActivateFitRequest(Strict):
    reason: Annotated[str, Field(min_length=1, max_length=500)] | None = Field(
        default=None,
        description="Why this fit should be used; required to activate a rejected fit. "
        "Written to the audit log.",
    )


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
        description="elastic / inelastic / unit-elastic, or unclear when the 95% interval "
        "spans -1 and wrong sign when it lies above 0 (own price); substitute / complement "
        "/ no clear relation (cross price); inferior / necessity / luxury (income-like)",
    )

    model_config = ConfigDict(populate_by_name=True)


class ShrunkOut(BaseModel):
    """The own-price elasticity after borrowing strength from the catalogue."""

    value: float | None = Field(
        description="The own-price elasticity of the shrunk fit at the same point as "
        "`elasticities` (empirical Bayes: the product's own estimate moved toward its "
        "family's and the catalogue's mean, the more the noisier it is)"
    )
    std_error: float | None
    ci_low: float | None
    ci_high: float | None
    class_: str | None = Field(
        alias="class",
        serialization_alias="class",
        description="As for the own-price row, from the shrunk value and interval",
    )
    family: str | None = Field(description="The family it was shrunk toward (null: none)")
    family_mean: float | None = Field(
        description="The estimated mean own-price elasticity of the family, at the means"
    )
    catalogue_mean: float | None = Field(
        description="The estimated mean own-price elasticity of the catalogue, at the means"
    )
    weight_on_family: float | None = Field(
        description="The family mean's weight in the shrunk value at the means (0 to 1)"
    )
    n_products: int = Field(description="Products whose active fits took part")

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
    shrunk: ShrunkOut | None = Field(
        description="The own-price elasticity shrunk toward the product's family and the "
        "catalogue over every active fit (see docs/estimation.md, Borrowing strength); null "
        "when fewer than three products have an active fit with a usable own-price "
        "elasticity. An estimate to weigh, not an instruction."
    )
    warnings: list[WarningOut]


class PredictRequest(Strict):
    price: PositiveMoney
    covariates: dict[CovariateName, FiniteNumber] = Field(
        default_factory=dict,
        description="Covariate values; others take the latest fitted period's, events "
        "(covariates only ever 0 or 1, such as a promotion) off",
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
    point: dict[str, float | None] = Field(
        description="Every variable's value the prediction used: those sent, the rest at "
        "the latest fitted period's values with events (covariates only ever 0 or 1) off"
    )
    warnings: list[WarningOut]


# -- rows to responses


def fit_summary(row: FitRow, sku: str) -> FitSummary:
    return FitSummary(
        id=row.id,
        sku=sku,
        version=row.version,
        status=row.status,
        form=row.form,
        n_obs=row.n_obs,
        own_price_estimate=row.own_price_estimate,
        holdout_wape=row.holdout_wape,
        created_at=as_utc(row.created_at),
    )


def fit_out(row: FitRow, sku: str) -> FitOut:
    result = row.result
    return FitOut(
        **fit_summary(row, sku).model_dump(),
        spec=row.spec,
        equation=result["equation"],
        coefficients=result["coefficients"],
        quality=result["quality"],
        diagnostics=result["diagnostics"],
        warnings=result["warnings"],
        gates=row.gates or {"passed": False, "checks": []},
        window=result["window"],
        price_range=list(result["price_range"]),
        candidate_scores=result.get("candidate_scores") or {},
        pooled=result.get("pooled"),
        review=review_step(row, sku),
    )


def shrunk_out(found: ShrunkFit, own: ElasticityRow | None) -> ShrunkOut | None:
    """The ``shrunk`` part of the elasticities answer: ``own`` is the own-price row of the
    shrunk fit at the asked point (None when nothing was shrunk)."""
    row = found.shrunk
    if row is None or own is None:
        return None
    values = {
        "value": own.value,
        "std_error": own.std_error,
        "ci_low": own.ci_low,
        "ci_high": own.ci_high,
        "family_mean": row.family_mean,
        "catalogue_mean": found.catalogue_mean,
        "weight_on_family": row.weight_on_family,
    }
    finite = {k: v if v is not None and math.isfinite(v) else None for k, v in values.items()}
    return ShrunkOut(
        **finite, class_=own.classification, family=row.family, n_products=found.n_products
    )
