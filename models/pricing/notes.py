"""Warning codes of a price recommendation, each with a sentence for people.

Amounts of money in the sentences are written by a :data:`~models.money.MoneyText`
function the caller passes (the currency's minor unit and code in the service).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Final

from models.guards import EXTRAPOLATION
from models.money import MoneyText, plain_money
from models.result import FitWarning

UNBOUNDED_ABOVE: Final = "objective_unbounded_above"
UNBOUNDED_BELOW: Final = "objective_unbounded_below"
COST_ABOVE_PRICES: Final = "cost_above_feasible_prices"
WRONG_SIGN_ALLOWED: Final = "wrong_sign_allowed"
NO_DEMAND: Final = "no_expected_demand"
WRONG_SIGN_DRAWS: Final = "wrong_sign_draws"
UNCERTAINTY_UNAVAILABLE: Final = "uncertainty_unavailable"
NO_CURRENT_FIGURES: Final = "current_figures_unavailable"

WARNING_CODES: Final = (
    EXTRAPOLATION,
    UNBOUNDED_ABOVE,
    UNBOUNDED_BELOW,
    COST_ABOVE_PRICES,
    WRONG_SIGN_ALLOWED,
    NO_DEMAND,
    WRONG_SIGN_DRAWS,
    UNCERTAINTY_UNAVAILABLE,
    NO_CURRENT_FIGURES,
)


def _names(binding: Sequence[str]) -> str:
    return ", ".join(binding) if binding else "a price limit"


def unbounded(
    direction: str,
    objective: str,
    elasticity: float,
    binding: Sequence[str],
    *,
    through_siblings: bool = False,
) -> FitWarning:
    """The optimum sits on a bound only because the objective keeps improving past it.

    ``through_siblings``: in a family, the product's own figures have an optimum, but
    the family total keeps improving because its siblings gain the demand it loses.
    """
    code = UNBOUNDED_ABOVE if direction == "above" else UNBOUNDED_BELOW
    moves = "rises" if direction == "above" else "falls"
    side = "upper" if direction == "above" else "lower"
    if through_siblings:
        why = (
            "the products whose demand depends on this price gain more than it loses "
            "(cross-price effects of the fitted family)"
        )
    elif direction == "above" and elasticity > -1.0:
        why = (
            f"demand is inelastic (own-price elasticity {elasticity:.3g} at the recommended "
            "price, above -1)"
        )
    elif direction == "above":
        why = f"the fitted demand never becomes elastic enough (elasticity {elasticity:.3g})"
    else:
        why = f"demand is elastic at every price (own-price elasticity {elasticity:.3g})"
    return FitWarning(
        code,
        f"The {objective} grows without limit as the price {moves} because {why}: the "
        f"recommendation sits on the {side} bound ({_names(binding)}) because of that, not "
        "at an optimum. Treat it as bound-driven.",
    )


def cost_above(
    unit_cost: float, highest: float, objective: str, money: MoneyText = plain_money
) -> FitWarning:
    """The unit cost is above every allowed price.

    >>> cost_above(12.5, 9.99, "profit", lambda v: f"{v:.2f} EUR").message[:54]
    'Unit cost 12.50 EUR is above every allowed price (at m'
    """
    tail = (
        "the recommendation is the allowed price that loses least"
        if objective == "profit"
        else "the revenue-maximising price sells below cost"
    )
    return FitWarning(
        COST_ABOVE_PRICES,
        f"Unit cost {money(unit_cost)} is above every allowed price (at most "
        f"{money(highest)}): each "
        f"unit sells at a loss; {tail}.",
    )


def wrong_sign_allowed(coef: float) -> FitWarning:
    return FitWarning(
        WRONG_SIGN_ALLOWED,
        f"Wrong sign: the own-price coefficient is {coef:+.3g} (demand rises with price); the "
        "price was optimised anyway because allow_wrong_sign was set, so the result follows "
        "the constraints, not the market.",
    )


def no_demand(price: float, money: MoneyText = plain_money) -> FitWarning:
    return FitWarning(
        NO_DEMAND,
        f"Expected units are zero at the recommended price {money(price)}: the fitted linear "
        "demand reaches zero inside the allowed prices.",
    )


def share_text(part: int, whole: int) -> str:
    """``part`` of ``whole`` as a percentage that keeps a significant digit (0.5%, not 0%)."""
    share = part / whole if whole else 0.0
    if share == 0.0 or share >= 0.1:
        return f"{share:.0%}"
    digits = max(1, -math.floor(math.log10(share * 100)))
    return f"{share:.{digits}%}"


def wrong_sign_draws(wrong: int, draws: int) -> FitWarning:
    """Some coefficient draws have the wrong sign (a non-negative own-price effect).

    >>> wrong_sign_draws(1, 200).message[:49]
    '1 of 200 coefficient draws (0.5%) has the wrong s'
    """
    verb = "has" if wrong == 1 else "have"
    return FitWarning(
        WRONG_SIGN_DRAWS,
        f"{wrong} of {draws} coefficient draws ({share_text(wrong, draws)}) {verb} the "
        "wrong sign (a non-negative own-price effect); the price interval includes their "
        "bound-driven optima.",
    )


def uncertainty_unavailable(reason: str) -> FitWarning:
    return FitWarning(UNCERTAINTY_UNAVAILABLE, f"No uncertainty figures: {reason}.")


def no_current_figures(missing: Sequence[str]) -> FitWarning:
    return FitWarning(
        NO_CURRENT_FIGURES,
        f"No current figures for the family: current prices are missing for {', '.join(missing)}.",
    )
