"""Request and response bodies of recommended prices."""

from __future__ import annotations

import datetime as dt
from typing import Annotated, Any, Literal

from pydantic import (
    BaseModel,
    Field,
    StrictBool,
    StringConstraints,
    model_validator,
)

from service.core.schemas import NAME_PATTERN, Money, PositiveMoney, Sku, Strict
from service.estimation.schemas import WarningOut
from service.pricing.decision_schemas import DecisionAnswer, DecisionFields
from service.pricing.review_schemas import STATE_HELP, RecommendationState
from service.pricing.rule_schemas import RuleFields

Objective = Literal["profit", "revenue"]
Percent = Annotated[float, Field(strict=True, ge=0, allow_inf_nan=False)]


class ConstraintsIn(Strict):
    """Constraints on a recommended price; product defaults fill min/max price."""

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
    allow_extrapolation: StrictBool = Field(
        default=False,
        description="Allow prices beyond the observed range widened by 10% (always warned)",
    )


Optimum = Literal["interior", "held_by_constraint", "held_by_rule", "no_finite_optimum"]
OPTIMUM_HELP = (
    "What kind of optimum the price is: `interior` (the objective's own best price, inside "
    "the allowed prices), `held_by_constraint` (a constraint holds the price where it is; see "
    "`binding_constraints`), `held_by_rule` (only jurisdiction rules hold it; see "
    "`binding_rules`) or `no_finite_optimum` (the objective keeps improving toward a "
    "bound, so the price sits on that bound)"
)
Search = Literal["continuous", "allowed_prices", "allowed_prices_local"]
SEARCH_HELP = (
    "How the price was found: `continuous` (any price in the allowed range), "
    "`allowed_prices` (every price a step or endings constraint allows compared) or "
    "`allowed_prices_local` (in large families, the allowed prices near the continuous "
    "optimum compared)"
)

ScenarioValue = Annotated[float, Field(strict=True, allow_inf_nan=False)]
ScenarioName = Annotated[str, StringConstraints(pattern=NAME_PATTERN)]
# A family scenario's key is a shared covariate's name or a product's sku.
ScenarioKey = Annotated[str, StringConstraints(pattern=r"^[A-Za-z0-9_][A-Za-z0-9_.-]{0,63}$")]


class OptimalPriceRequest(DecisionFields, Strict):
    objective: Objective = "profit"
    constraints: ConstraintsIn = Field(default_factory=ConstraintsIn)
    scenario: dict[ScenarioName, ScenarioValue] = Field(
        default_factory=dict,
        description="Covariate values and other products' prices (by sku); the rest "
        "take the latest fitted period's values, with events (covariates only ever 0 or 1, "
        "such as a promotion or a holiday) off",
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
    allow_wrong_sign: StrictBool = Field(
        default=False, description="Optimise even when the own-price effect has the wrong sign"
    )
    store: StrictBool = Field(
        default=False,
        description="Store the answer as a proposed recommendation (needs the `write` "
        "scope); by default nothing is stored: a what-if answer",
    )

    @model_validator(mode="after")
    def _curve_size(self) -> OptimalPriceRequest:
        if 0 < self.curve_points < 50:
            raise ValueError("curve_points must be 0 or between 50 and 200")
        return self


class PricePointOut(BaseModel):
    price: float | None = Field(
        description="In the minor unit of the product's currency (cents for EUR, none for "
        "JPY); units, revenue and profit are those of the price the search found"
    )
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


class RecommendationOut(DecisionAnswer, RuleFields):
    """A recommended price: estimates from past data, for a person to approve.

    Prices (current, recommended, unconstrained, the uncertainty's price interval) are
    rounded to the minor unit of the product's currency, never across a constraint: a
    price on the change cap or a bound is rounded toward the allowed side. `change_pct`
    compares the rounded prices.
    """

    id: int | None = Field(
        default=None, description="The stored recommendation's id; null when not stored"
    )
    sku: str
    fit_id: int | None
    created_at: dt.datetime | None = Field(
        default=None, description="When it was stored; null when not"
    )
    state: RecommendationState | None = Field(default=None, description=STATE_HELP)
    decided_at: dt.datetime | None = None
    decided_by_key_id: str | None = Field(
        default=None, description="The key that approved or declined it"
    )
    policy_id: int | None = Field(
        default=None, description="The approval policy that approved it, if one did"
    )
    approved_price: float | None = Field(
        default=None,
        description="The price approved: the recommended one unless a person edited it",
    )
    effective_from: dt.datetime | None = Field(
        default=None, description="When the approved price goes live"
    )
    note: str | None = None
    prior_price: float | None = Field(
        default=None,
        description="For a recommendation that lowers the price: the lowest price live in "
        "the 30 days before it was made (the prior price of article 6a of the EU Price "
        "Indication Directive 98/6/EC), null if the price record has none",
    )
    form: str
    objective: Objective
    unit_cost: float | None
    current: PricePointOut | None
    recommended: PricePointOut
    change_pct: float | None
    unconstrained_price: float | None = Field(
        description="The best price with no constraint (null when there is none)"
    )
    binding_constraints: list[str]
    feasible_range: RangeOut | None
    uncertainty: UncertaintyOut | None
    warnings: list[WarningOut]
    curve: list[CurvePointOut] | None = None
    scenario: dict[str, Any] = Field(
        description="The other variables' values the demand was evaluated at: those sent "
        "in the request's scenario, the rest at the latest fitted period's values with "
        "events (covariates only ever 0 or 1) off"
    )
    optimum: Optimum = Field(description=OPTIMUM_HELP)
    search: Search = Field(description=SEARCH_HELP)
    search_steps: int = Field(
        description="Steps of the search: iterations (continuous) or allowed prices compared"
    )
    summary: str = Field(description="One sentence on the optimum, in plain words")


class FamilyPriceRequest(Strict):
    objective: Objective = "profit"
    constraints: ConstraintsIn = Field(
        default_factory=ConstraintsIn, description="Constraints for every product of the family"
    )
    product_constraints: dict[Sku, ConstraintsIn] = Field(
        default_factory=dict, description="Constraints for one product, replacing the shared ones"
    )
    order: list[Annotated[list[Sku], Field(min_length=2, max_length=2)]] = Field(
        default_factory=list, description="Price ladder: [a, b] means price(a) <= price(b)"
    )
    max_total_change_pct: Percent | None = Field(
        default=None, description="Cap on the move of the family's unit-weighted price index"
    )
    scenario: dict[ScenarioKey, ScenarioValue | dict[ScenarioName, ScenarioValue]] = Field(
        default_factory=dict,
        description="Shared covariate values ({name: number}), or {sku: {name: number}} for "
        "one product; every value a finite number",
    )
    uncertainty_draws: Annotated[int, Field(strict=True, ge=0, le=1000)] = 0
    seed: Annotated[int, Field(strict=True, ge=0)] = 0
    allow_wrong_sign: StrictBool = Field(
        default=False, description="Optimise even when an own-price effect has the wrong sign"
    )
    store: StrictBool = Field(
        default=False,
        description="Store each product's answer as a proposed recommendation (needs the "
        "`write` scope); by default nothing is stored: a what-if answer",
    )


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
    value_of_knowing: float | None = Field(
        default=None,
        description="Family profit (or revenue) per period expected to be lost because the "
        "demand curves are not known exactly: the average over the coefficient draws of each "
        "draw's best family figure less the figure at the recommended prices (a draw's gain "
        "floored at zero). Needs `uncertainty_draws`; null without them",
    )


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
    optimum: Optimum = Field(description=OPTIMUM_HELP)
    search: Search = Field(description=SEARCH_HELP)
    search_steps: int = Field(
        description="Steps of the search: iterations (continuous) or allowed prices compared"
    )
    summary: str = Field(description="One sentence on the optimum, in plain words")
