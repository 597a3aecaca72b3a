"""Request and response bodies of jurisdiction rules, and the rule fields of a
recommendation's answer."""

from __future__ import annotations

import datetime as dt
from typing import Annotated, Literal

from pydantic import BaseModel, Field, StringConstraints, model_validator

from service.core.schemas import SKU_PATTERN, DateText, Strict

RuleKind = Literal[
    "no_sale_below_cost", "emergency_increase_cap", "min_change_interval", "prior_price_cap"
]
AppliesTo = Literal["product", "family", "catalogue"]
RULES_CAUTION = (
    "Jurisdiction rules are tools that help follow a place's pricing rules (price gouging, "
    "below-cost sales, reference prices); they are not legal advice. Local law and "
    "qualified advice decide what applies, and a person approves prices."
)
KIND_HELP = (
    "`no_sale_below_cost`: never below the unit cost. `emergency_increase_cap`: during the "
    "declared emergency (`starts_on` to `ends_on`, UTC dates, both included), at most "
    "`max_increase_pct` above the lowest price live in the `window_days` before. "
    "`min_change_interval`: the price is held while fewer than `min_interval_days` days "
    "have passed since it last changed. `prior_price_cap`: at most `max_increase_pct` "
    "above the lowest price live in the `window_days` (default 30) days before. Without a "
    "price record, the product's current price stands in for earlier prices."
)
Percent = Annotated[float, Field(strict=True, ge=0, le=1000, allow_inf_nan=False)]
Days = Annotated[int, Field(strict=True, ge=1, le=3660)]


class RuleIn(Strict):
    name: Annotated[str, StringConstraints(min_length=1, max_length=100, strip_whitespace=True)] = (
        Field(description="Your name for the rule; answers name the rule that bound a price")
    )
    kind: RuleKind = Field(description=KIND_HELP)
    applies_to: AppliesTo = Field(description="A product, a family or the whole catalogue")
    target: Annotated[str, StringConstraints(pattern=SKU_PATTERN)] | None = Field(
        default=None, description="The product's sku or the family; none for the catalogue"
    )
    max_increase_pct: Percent | None = Field(
        default=None, description="The caps' largest increase, in percent"
    )
    window_days: Days | None = Field(
        default=None, description="The caps' look-back window in days (prior price: 30)"
    )
    min_interval_days: Days | None = Field(
        default=None, description="Days that must pass between price changes"
    )
    starts_on: DateText | None = Field(default=None, description="First day of the emergency")
    ends_on: DateText | None = Field(default=None, description="Last day of the emergency")
    note: Annotated[str, StringConstraints(max_length=500)] | None = Field(
        default=None, description="Where the rule comes from, for the people who read it"
    )

    @model_validator(mode="after")
    def _fields_of_kind(self) -> RuleIn:
        needs = {
            "no_sale_below_cost": set(),
            "emergency_increase_cap": {"max_increase_pct", "window_days", "starts_on", "ends_on"},
            "min_change_interval": {"min_interval_days"},
            "prior_price_cap": {"max_increase_pct"},
        }[self.kind]
        allowed = needs | ({"window_days"} if self.kind == "prior_price_cap" else set())
        given = {
            name
            for name in (
                "max_increase_pct",
                "window_days",
                "min_interval_days",
                "starts_on",
                "ends_on",
            )
            if getattr(self, name) is not None
        }
        missing, extra = sorted(needs - given), sorted(given - allowed)
        if missing:
            raise ValueError(f"a {self.kind} rule needs {', '.join(missing)}")
        if extra:
            raise ValueError(f"a {self.kind} rule takes no {', '.join(extra)}")
        if self.starts_on and self.ends_on and self.ends_on < self.starts_on:
            raise ValueError("ends_on comes before starts_on")
        if (self.applies_to == "catalogue") != (self.target is None):
            raise ValueError("give a target (sku or family) unless the rule is for the catalogue")
        return self


class RuleOut(BaseModel):
    id: int
    name: str
    kind: RuleKind
    applies_to: AppliesTo
    target: str | None
    max_increase_pct: float | None
    window_days: int | None
    min_interval_days: int | None
    starts_on: dt.date | None
    ends_on: dt.date | None
    note: str | None
    created_by_key_id: str | None
    created_at: dt.datetime
    ended_at: dt.datetime | None = Field(description="When the rule stopped applying; null: not")
    ended_by_key_id: str | None
    in_effect: bool = Field(description="Whether the rule applies now")


class RuleList(BaseModel):
    items: list[RuleOut]


class RuleLimitOut(BaseModel):
    name: str
    kind: RuleKind
    low: float | None = Field(description="The lowest price the rule allows; null: no floor")
    high: float | None = Field(description="The highest price the rule allows; null: no cap")
    detail: str


class RuleNotApplied(BaseModel):
    name: str
    reason: str


class RuleFields(BaseModel):
    """What a recommendation says of the jurisdiction rules in effect for its product."""

    binding_rules: list[str] = Field(
        default_factory=list,
        description="Names of the jurisdiction rules that hold the price where it is "
        "(business limits are in `binding_constraints`)",
    )
    rules_applied: list[RuleLimitOut] = Field(
        default_factory=list, description="The jurisdiction rules in effect and their limits"
    )
    rules_not_applied: list[RuleNotApplied] = Field(
        default_factory=list,
        description="Rules in effect that could not be worked out (no unit cost, no earlier "
        "price), so did not limit the price",
    )
