"""Request and response bodies of the reviewed path, the price record and approval
policies."""

from __future__ import annotations

import datetime as dt
from typing import Annotated, Literal

from pydantic import BaseModel, Field, StringConstraints

from service.core.schemas import DateTimeText, PositiveMoney, Sku, Strict

RecommendationState = Literal["proposed", "approved", "declined", "superseded"]
STATE_HELP = (
    "Where the recommendation stands: `proposed` (stored, waiting for a person or an "
    "approval policy), `approved` (its price, or an edited one, is live from the approval's "
    "time), `declined` (a person refused it) or `superseded` (a newer proposed one for the "
    "product replaced it); null for an answer that was not stored"
)
Note = Annotated[str, StringConstraints(min_length=1, max_length=500)]
Name = Annotated[str, StringConstraints(min_length=1, max_length=100)]
PolicyPercent = Annotated[float, Field(strict=True, gt=0, le=100, allow_inf_nan=False)]
MarginPercent = Annotated[float, Field(strict=True, ge=-100, lt=100, allow_inf_nan=False)]


class ApprovalIn(Strict):
    price: PositiveMoney | None = Field(
        default=None, description="An edited price to approve instead of the recommended one"
    )
    note: Note | None = Field(default=None, description="Why, in a sentence")
    effective_at: DateTimeText | None = Field(
        default=None,
        description="When the price goes live (RFC 3339); default now. It may not lie in the "
        "past, and must be after the start of the newest price in the product's price record",
    )


class DeclineIn(Strict):
    note: Note = Field(description="Why the recommendation is declined")


class DecisionOut(BaseModel):
    id: int = Field(description="The recommendation's id")
    sku: str
    state: RecommendationState = Field(description=STATE_HELP)
    price: float | None = Field(description="The approved price; null when declined")
    effective_from: dt.datetime | None = Field(
        description="When the approved price goes live; null when declined"
    )


class PriceEntryOut(BaseModel):
    price: float
    effective_from: dt.datetime
    effective_to: dt.datetime | None = Field(
        description="When the next price took over; null for the newest price"
    )
    set_by_key_id: str | None = Field(
        description="The key that approved it; null when an approval policy did"
    )
    policy_id: int | None = Field(description="The approval policy that approved it, if any")
    recommendation_id: int | None
    fit_id: int | None
    note: str | None


class PriceRecordOut(BaseModel):
    sku: str
    currency: str
    live_price: float | None = Field(description="The price live now; null if none yet")
    prior_price: float | None = Field(
        description="The lowest price live in the 30 days before now (the prior price to "
        "show beside a reduction under article 6a of the EU Price Indication Directive "
        "98/6/EC); null if no price was live then"
    )
    last_change: dt.datetime | None = Field(description="When the live price last changed")
    entries: list[PriceEntryOut] = Field(description="Every live price, newest first")


class PolicyIn(Strict):
    name: Name
    applies_to: Literal["product", "family", "catalogue"]
    target: Sku | None = Field(
        default=None, description="The product's sku or the family; none for the catalogue"
    )
    max_change_pct: PolicyPercent = Field(
        description="Approve only changes under this percentage, up or down"
    )
    min_margin_pct: MarginPercent | None = Field(
        default=None, description="Approve only margins above this percentage"
    )


class PolicyOut(BaseModel):
    id: int
    name: str
    applies_to: str
    target: str | None
    max_change_pct: float
    min_margin_pct: float | None
    created_by_key_id: str | None
    created_at: dt.datetime
    ended_at: dt.datetime | None
