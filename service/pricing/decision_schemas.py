"""How a price is chosen from an uncertain estimate: request fields and answer figures."""

from __future__ import annotations

from typing import Literal

from pydantic import BaseModel, Field, StrictBool

DecideBy = Literal["point", "expected", "cautious", "calibrated"]
DEFAULT_DECIDE_BY: DecideBy = "calibrated"
CALIBRATED = "calibrated"
DEFAULT_NO_HARM_CHECK = True
"""The do-no-harm check's default for point, expected and cautious (calibrated: off)."""
DECIDE_BY_HELP = (
    "How the price is chosen from the estimate, which is uncertain: `point` takes the fitted "
    "coefficients as exact; `expected` maximises the average profit (or revenue) over the "
    "estimate's distribution; `cautious` maximises the profit reached in nine of ten "
    "outcomes of that distribution (its 10th percentile), which keeps prices nearer those "
    "the data have seen; `calibrated` moves each price the share of its point move that the "
    "catalogue's spread of moves supports beyond the estimates' noise (the same as "
    "`cautious` where fewer than three products can be priced). The default was chosen by "
    "the decision study in the README"
)
NO_HARM_HELP = (
    "Keep the current price unless the chosen one earns more on average and in at least 80% "
    "of the estimate's distribution (needs a current price the constraints allow). Default: "
    "on, except with `decide_by: calibrated`, whose reach already does that work"
)


class DecisionFields(BaseModel):
    """How to choose the price, shared by single-product requests and reprice jobs."""

    decide_by: DecideBy = Field(default=DEFAULT_DECIDE_BY, description=DECIDE_BY_HELP)
    no_harm_check: StrictBool | None = Field(default=None, description=NO_HARM_HELP)


class DecisionFiguresOut(BaseModel):
    """How the price was chosen under uncertainty and what the uncertainty costs."""

    decide_by: DecideBy
    cautious_level: float | None = Field(
        description="The share of outcomes below the profit the cautious choice maximises (0.1)"
    )
    expected_objective: float | None = Field(
        description="Average profit (or revenue) per period at the recommended price over the "
        "estimate's distribution"
    )
    value_of_knowing: float | None = Field(
        description="Profit (or revenue) per period expected to be lost because the demand "
        "curve is not known exactly: what knowing it would be worth. Large values mark "
        "products where a price test pays"
    )
    expected_gain: float | None = Field(
        description="Average gain per period of the recommended price over the current one"
    )
    chance_of_gain: float | None = Field(
        description="Share of the estimate's distribution in which the recommended price "
        "earns more than the current one"
    )
    held_current: bool = Field(
        description="The do-no-harm check kept the current price: the move did not win "
        "clearly enough"
    )


class DecisionAnswer(BaseModel):
    """How a single-product answer chose its price (null in a family's products and in
    recommendations stored before they existed)."""

    decision_figures: DecisionFiguresOut | None = Field(
        default=None,
        description="How the price was chosen under uncertainty, and the value of knowing",
    )
