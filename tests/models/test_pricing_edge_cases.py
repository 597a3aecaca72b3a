"""Edge cases of single-product pricing: each gives a clear answer or a named error."""

from __future__ import annotations

import json

import numpy as np
import pytest

from models import (
    InfeasibleConstraintsError,
    MissingUnitCostError,
    PriceConstraints,
    PricingInputError,
    UnboundedObjectiveError,
    WrongSignError,
    optimal_price,
)
from models.guards import EXTRAPOLATION
from tests.plugins.pricing_cases import exact_fit

PRICES = np.linspace(8.0, 16.0, 40)  # observed range 8-16, guard 7.2-17.6


def power_fit(elasticity: float):
    return exact_fit("TEA-100", "log-log", PRICES, 1000.0 * PRICES**elasticity)


def codes(result) -> list[str]:
    return [w.code for w in result.warnings]


def test_inelastic_revenue_sits_on_the_upper_bound_and_says_why() -> None:
    fit = power_fit(-0.6)
    result = optimal_price(fit, objective="revenue", current_price=12.0)
    assert result.recommended.price == pytest.approx(17.6)
    assert result.binding_constraints == ("observed_price_range",)
    assert result.unconstrained_price is None and result.optimum == "no_finite_optimum"
    note = result.warnings[codes(result).index("objective_unbounded_above")]
    assert "inelastic" in note.message and "upper bound (observed_price_range)" in note.message
    assert "bound-driven" in note.message
    capped = optimal_price(fit, objective="revenue", constraints=PriceConstraints(max_price=15.0))
    assert capped.recommended.price == pytest.approx(15.0)
    assert capped.binding_constraints == ("max_price",)
    assert "upper bound (max_price)" in capped.warnings[0].message
    json.dumps(result.to_dict(), allow_nan=False)


def test_inelastic_profit_is_unbounded_too() -> None:
    result = optimal_price(power_fit(-0.8), unit_cost=5.0)
    assert result.recommended.price == pytest.approx(17.6)
    assert "objective_unbounded_above" in codes(result)
    assert "profit grows without limit" in result.warnings[0].message


def test_elastic_revenue_falls_to_the_lower_bound() -> None:
    # Constant elasticity -3: revenue A p^-2 falls with price at every price.
    result = optimal_price(power_fit(-3.0), objective="revenue")
    assert result.recommended.price == pytest.approx(7.2)
    assert "objective_unbounded_below" in codes(result) and result.optimum == "no_finite_optimum"


def test_unbounded_objective_without_any_cap_is_an_error() -> None:
    with pytest.raises(UnboundedObjectiveError, match="max_price") as info:
        optimal_price(
            power_fit(-0.6),
            objective="revenue",
            constraints=PriceConstraints(allow_extrapolation=True),
        )
    assert info.value.direction == "above" and info.value.sku == "TEA-100"
    assert isinstance(info.value, ValueError)
    with pytest.raises(UnboundedObjectiveError, match="min_price") as info:
        optimal_price(
            power_fit(-3.0),
            objective="revenue",
            constraints=PriceConstraints(allow_extrapolation=True),
        )
    assert info.value.direction == "below"


def test_cost_above_every_feasible_price() -> None:
    result = optimal_price(power_fit(-2.0), unit_cost=20.0, current_price=12.0)
    assert result.recommended.price == pytest.approx(17.6)  # the price that loses least
    assert (result.recommended.profit or 0.0) < 0.0
    note = result.warnings[codes(result).index("cost_above_feasible_prices")]
    assert "Unit cost 20 is above every allowed price (at most 17.6)" in note.message
    assert "loses least" in note.message
    revenue = optimal_price(power_fit(-2.0), objective="revenue", unit_cost=20.0)
    assert "cost_above_feasible_prices" in codes(revenue)


def test_infeasible_constraints_name_the_conflict() -> None:
    fit = power_fit(-2.0)
    with pytest.raises(InfeasibleConstraintsError) as info:
        optimal_price(
            fit,
            unit_cost=9.0,
            constraints=PriceConstraints(min_margin_pct=50.0, max_price=15.0),
        )
    error = info.value
    # Margin 50% over cost 9 needs at least 18; both max_price (15) and the guard (17.6) forbid.
    assert set(error.constraints) == {"min_margin_pct", "max_price", "observed_price_range"}
    assert "min_margin_pct needs a price of at least 18" in str(error)
    assert "max_price allows a price of at most 15" in str(error)
    assert str(error).startswith("TEA-100: no price satisfies every constraint")
    with pytest.raises(InfeasibleConstraintsError) as info:
        optimal_price(fit, unit_cost=9.0, constraints=PriceConstraints(min_price=13, max_price=12))
    assert info.value.constraints == ["min_price", "max_price"]


def test_infeasible_stock_and_change_limits() -> None:
    fit = power_fit(-2.0)
    units_at_12 = 1000.0 / 144.0
    with pytest.raises(InfeasibleConstraintsError) as info:
        optimal_price(
            fit,
            unit_cost=5.0,
            current_price=12.0,
            constraints=PriceConstraints(max_units=0.5 * units_at_12, max_change_pct=10.0),
        )
    assert set(info.value.constraints) == {"max_units", "max_change_pct"}
    with pytest.raises(InfeasibleConstraintsError, match="no allowed price") as info:
        optimal_price(
            fit,
            unit_cost=5.0,
            current_price=12.5,  # allowed 12.4375 to 12.5625: no price ends in .99
            constraints=PriceConstraints(price_endings=(0.99,), max_change_pct=0.5),
        )
    assert info.value.constraints == ["price_endings", "max_change_pct"]
    # A stock cap of zero can never be met by a constant-elasticity curve.
    with pytest.raises(InfeasibleConstraintsError, match="cannot be met") as info:
        optimal_price(fit, unit_cost=5.0, constraints=PriceConstraints(max_units=0.0))
    assert info.value.constraints == ["max_units"]


def test_wrong_signed_own_price_effect() -> None:
    fit = power_fit(0.7)
    with pytest.raises(WrongSignError) as info:
        optimal_price(fit, unit_cost=5.0)
    error = info.value
    assert error.skus == ["TEA-100"]
    assert error.coefficients["TEA-100"] == pytest.approx(0.7)
    assert "own-price coefficient of the log-log fit is +0.7" in error.reason
    assert "allow_wrong_sign=true" in error.reason
    assert not isinstance(error, InfeasibleConstraintsError)  # distinct: HTTP 409, not 422
    forced = optimal_price(fit, unit_cost=5.0, allow_wrong_sign=True)
    assert codes(forced)[0] == "wrong_sign_allowed"
    assert forced.recommended.price == pytest.approx(17.6)  # demand rises with price


def test_profit_needs_a_unit_cost() -> None:
    fit = power_fit(-2.0)
    with pytest.raises(MissingUnitCostError, match="objective=profit needs a unit cost") as info:
        optimal_price(fit, objective="profit")
    assert info.value.skus == ["TEA-100"] and isinstance(info.value, ValueError)
    with pytest.raises(MissingUnitCostError, match="min_margin_pct"):
        optimal_price(fit, objective="revenue", constraints=PriceConstraints(min_margin_pct=20.0))
    revenue = optimal_price(fit, objective="revenue", constraints=PriceConstraints(max_price=9))
    assert revenue.recommended.profit is None and revenue.recommended.margin_pct is None


def test_other_input_problems() -> None:
    fit = power_fit(-2.0)
    with pytest.raises(PricingInputError, match="max_change_pct needs the current price"):
        optimal_price(fit, unit_cost=5.0, constraints=PriceConstraints(max_change_pct=5.0))
    with pytest.raises(PricingInputError, match="unknown scenario variable 'promo'"):
        optimal_price(fit, unit_cost=5.0, scenario={"promo": 1.0})
    with pytest.raises(PricingInputError, match="cannot set the own price"):
        optimal_price(fit, unit_cost=5.0, scenario={"price": 9.0})
    with pytest.raises(PricingInputError, match="objective"):
        optimal_price(fit, objective="volume", unit_cost=5.0)
    with pytest.raises(PricingInputError, match="current_price"):
        optimal_price(fit, unit_cost=5.0, current_price=-1.0)


def test_extrapolation_guard_and_warning() -> None:
    fit = power_fit(-1.5)  # profit optimum 3c
    guarded = optimal_price(fit, unit_cost=7.0)  # optimum 21, beyond the guard
    assert guarded.recommended.price == pytest.approx(17.6)
    assert guarded.binding_constraints == ("observed_price_range",)
    assert EXTRAPOLATION in codes(guarded)
    assert guarded.unconstrained_price == pytest.approx(21.0, rel=1e-9)
    lifted = optimal_price(
        fit, unit_cost=7.0, constraints=PriceConstraints(allow_extrapolation=True)
    )
    assert lifted.recommended.price == pytest.approx(21.0, rel=1e-9)
    note = lifted.warnings[codes(lifted).index(EXTRAPOLATION)]
    assert "31% above the highest price observed" in note.message
    inside = optimal_price(fit, unit_cost=4.0)  # optimum 12
    assert EXTRAPOLATION not in codes(inside)


def test_linear_demand_that_reaches_zero() -> None:
    fit = exact_fit("TEA-200", "linear", PRICES, 100.0 - 2.0 * PRICES)  # zero from 50
    result = optimal_price(
        fit,
        unit_cost=55.0,
        constraints=PriceConstraints(allow_extrapolation=True, max_price=60.0),
    )
    assert result.recommended.units == 0.0 and result.recommended.profit == 0.0
    assert result.recommended.price >= 50.0
    assert "no_expected_demand" in codes(result)
    json.dumps(result.to_dict(), allow_nan=False)


@pytest.mark.parametrize("cost", [18.0, 19.5, 19.9])
def test_narrow_profitable_window_of_linear_demand_is_found(cost: float) -> None:
    # q = 2000 - 100 p sells nothing above 20; with cost c the profit (p - c)(2000 - 100 p)
    # peaks at (20 + c)/2 (Pindyck & Rubinfeld, ch. 10, MR = MC). The window (c, 20) is
    # narrow next to the open search range an extrapolating request allows.
    prices = np.linspace(8.0, 16.0, 40)
    fit = exact_fit("LIN", "linear", prices, 2000.0 - 100.0 * prices)
    result = optimal_price(
        fit,
        unit_cost=cost,
        current_price=12.0,
        constraints=PriceConstraints(allow_extrapolation=True),
    )
    assert result.recommended.price == pytest.approx((20.0 + cost) / 2, rel=1e-9)
    assert result.unconstrained_price == pytest.approx((20.0 + cost) / 2, rel=1e-9)
