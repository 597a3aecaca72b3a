"""Constrained single-product optima against brute-force searches.

Fits are estimated on simulated tea-shop data (noisy, with covariates); the brute
force evaluates the fitted demand independently (tests.plugins.pricing_cases) on a grid
of 400,001 prices and keeps the allowed ones. The optimiser must match it to the grid's
resolution and never do worse.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass
from functools import cache

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from models import (
    DemandFit,
    InfeasibleConstraintsError,
    InvalidConstraintsError,
    ModelSpec,
    NamedLimit,
    PriceConstraints,
    PricingInputError,
    fit_demand,
    optimal_price,
    predict,
    simulate_product,
)
from models.scenario import COVARIATES, LOG_COVARIATES
from tests.plugins.pricing_cases import brute_force, check_against_predict, expected_units

FORMS = ("log-log", "semi-log", "linear", "poisson")


@dataclass(frozen=True)
class Case:
    fit: DemandFit
    cost: float
    current: float


@cache
def case(form: str) -> Case:
    product = simulate_product(11, form=form, elasticity=-2.2, sku=f"SIM-{form}")
    spec = ModelSpec(form=form, covariates=COVARIATES, log_covariates=LOG_COVARIATES)
    fit = fit_demand(product.history, spec)
    return Case(fit, product.unit_cost, product.current_price)


def allowed_mask(
    c: PriceConstraints, fit: DemandFit, cost: float, current: float
):  # -> Callable[[np.ndarray], np.ndarray]
    """Every constraint written out directly, independently of models.pricing."""

    def allowed(p: np.ndarray) -> np.ndarray:
        ok = np.ones(p.shape, dtype=bool)
        eps = 1e-9
        if not c.allow_extrapolation:
            low, high = fit.price_range
            ok &= (p >= 0.9 * low * (1 - eps)) & (p <= 1.1 * high * (1 + eps))
        if c.min_price is not None:
            ok &= p >= c.min_price * (1 - eps)
        if c.max_price is not None:
            ok &= p <= c.max_price * (1 + eps)
        for limit in c.named_limits:
            if limit.low is not None:
                ok &= p >= limit.low * (1 - eps)
            if limit.high is not None:
                ok &= p <= limit.high * (1 + eps)
        if c.max_change_pct is not None:
            ok &= np.abs(p / current - 1.0) <= c.max_change_pct / 100 + eps
        if c.min_margin_pct is not None:
            ok &= (p - cost) / p >= c.min_margin_pct / 100 - eps
        units = expected_units(fit, p)
        if c.max_units is not None:
            ok &= units <= c.max_units * (1 + eps)
        if c.min_units is not None:
            ok &= units >= c.min_units * (1 - eps)
        return ok

    return allowed


def allowed_grid(c: PriceConstraints, low: float, high: float) -> np.ndarray:
    """All prices of the allowed grid in [low, high], enumerated naively."""
    if c.price_step is not None:
        k = np.arange(math.floor(low / c.price_step) - 1, math.ceil(high / c.price_step) + 2)
        prices = np.round(k * c.price_step, 10)
    else:
        whole = np.arange(math.floor(low) - 1, math.ceil(high) + 2)
        prices = np.round((whole[:, None] + np.array(c.price_endings)[None, :]).ravel(), 10)
    return prices[(prices >= low) & (prices <= high) & (prices > 0)]


def check(form: str, objective: str, c: PriceConstraints) -> None:
    data = case(form)
    fit, cost, current = data.fit, data.cost, data.current
    result = optimal_price(
        fit, objective=objective, unit_cost=cost, current_price=current, constraints=c
    )
    json.dumps(result.to_dict(), allow_nan=False)
    margin = cost if objective == "profit" else 0.0

    def value(p: np.ndarray) -> np.ndarray:
        return (p - margin) * expected_units(fit, p)

    allowed = allowed_mask(c, fit, cost, current)
    price = result.recommended.price
    assert allowed(np.array([price])).all(), (price, c)
    lo, hi = fit.price_range
    span = (0.9 * lo, 1.1 * hi)
    if c.allow_extrapolation:
        span = (min(0.5 * lo, c.min_price or lo), max(2.0 * hi, c.max_price or 0.0))
    if c.grid_name is None:
        best, best_value, step = brute_force(value, allowed, *span)
        assert abs(price - best) <= step, (price, best)
        assert float(value(np.array(price))) >= best_value - 1e-9 * abs(best_value)
    else:
        grid = allowed_grid(c, *span)
        grid = grid[allowed(grid)]
        values = value(grid)
        assert float(value(np.array(price))) >= values.max() - 1e-12 * abs(values.max())
        assert price in set(grid.tolist())


def test_fits_evaluate_like_predict() -> None:
    for form in FORMS:
        fit = case(form).fit
        check_against_predict(fit, [fit.price_range[0], sum(fit.price_range) / 2])


CASES = {
    "default guard": PriceConstraints(),
    "price bounds": PriceConstraints(min_price=9.0, max_price=9.6),
    "max change": PriceConstraints(max_change_pct=3.0),
    "margin floor": PriceConstraints(min_margin_pct=55.0),
    "endings": PriceConstraints(price_endings=(0.49, 0.99)),
    "step": PriceConstraints(price_step=0.05),
    "step and change": PriceConstraints(price_step=0.25, max_change_pct=4.0),
    "stock cap": PriceConstraints(max_units=60.0),
    "min units": PriceConstraints(min_units=150.0),
    "stock and endings": PriceConstraints(max_units=80.0, price_endings=(0.95,)),
    "margin, change, endings": PriceConstraints(
        min_margin_pct=45.0, max_change_pct=8.0, price_endings=(0.29, 0.79)
    ),
    "no guard": PriceConstraints(allow_extrapolation=True, min_price=3.0, max_price=30.0),
    "named limits": PriceConstraints(
        named_limits=(NamedLimit("floor", low=9.1), NamedLimit("ceiling", high=9.5))
    ),
    "named limits and endings": PriceConstraints(
        named_limits=(NamedLimit("band", low=8.0, high=11.0),), price_endings=(0.49, 0.99)
    ),
}


@pytest.mark.parametrize("name", sorted(CASES))
@pytest.mark.parametrize("form", FORMS)
@pytest.mark.parametrize("objective", ["profit", "revenue"])
def test_constrained_optimum_matches_brute_force(name: str, form: str, objective: str) -> None:
    constraints = CASES[name]
    try:
        check(form, objective, constraints)
    except InfeasibleConstraintsError as error:
        # Then the brute force must agree that nothing is allowed.
        data = case(form)
        allowed = allowed_mask(constraints, data.fit, data.cost, data.current)
        lo, hi = data.fit.price_range
        grid = np.linspace(0.5 * lo, 2 * hi, 200_001)
        if constraints.grid_name is not None:
            grid = allowed_grid(constraints, 0.5 * lo, 2 * hi)
        assert not allowed(grid).any(), error


def test_binding_constraints_are_named() -> None:
    data = case("poisson")  # its profit optimum lies inside the observed prices
    free = optimal_price(data.fit, unit_cost=data.cost, current_price=data.current)
    assert free.binding_constraints == () and free.optimum == "interior"
    assert free.recommended.price == pytest.approx(free.unconstrained_price, rel=1e-9)
    half_way = abs(free.recommended.price / data.current - 1.0) * 50.0
    result = optimal_price(
        data.fit,
        unit_cost=data.cost,
        current_price=data.current,
        constraints=PriceConstraints(max_change_pct=half_way),
    )
    assert result.binding_constraints == ("max_change_pct",)
    assert result.optimum == "held_by_constraint" and "max_change_pct" in result.summary
    assert abs(result.change_pct or 0.0) == pytest.approx(half_way, rel=1e-9)
    on_grid = optimal_price(
        data.fit,
        unit_cost=data.cost,
        current_price=data.current,
        constraints=PriceConstraints(max_change_pct=half_way, price_step=0.01),
    )
    assert on_grid.binding_constraints == ("max_change_pct", "price_step")
    assert on_grid.search == "allowed_prices"


def test_named_limits_come_back_under_their_names() -> None:
    data = case("poisson")  # its profit optimum lies inside the observed prices
    free = optimal_price(data.fit, unit_cost=data.cost, current_price=data.current)
    price = free.recommended.price
    capped = optimal_price(
        data.fit,
        unit_cost=data.cost,
        current_price=data.current,
        constraints=PriceConstraints(named_limits=(NamedLimit("rule:cap", high=0.95 * price),)),
    )
    assert capped.binding_constraints == ("rule:cap",)
    assert capped.recommended.price == pytest.approx(0.95 * price, rel=1e-12)
    held = optimal_price(
        data.fit,
        unit_cost=data.cost,
        current_price=data.current,
        constraints=PriceConstraints(
            named_limits=(NamedLimit("rule:hold", low=data.current, high=data.current),)
        ),
    )
    assert held.recommended.price == pytest.approx(data.current, rel=1e-12)
    assert held.binding_constraints == ("rule:hold",)
    with pytest.raises(InfeasibleConstraintsError) as conflict:
        optimal_price(
            data.fit,
            unit_cost=data.cost,
            constraints=PriceConstraints(
                max_price=0.5 * price, named_limits=(NamedLimit("rule:floor", low=price),)
            ),
        )
    assert {"rule:floor", "max_price"} <= set(conflict.value.constraints)
    with pytest.raises(InvalidConstraintsError):
        PriceConstraints(named_limits=(NamedLimit("rule:bad", low=math.inf),))
    constraints = PriceConstraints(named_limits=(NamedLimit("band", low=1.0, high=2.0),))
    assert PriceConstraints.from_dict(constraints.to_dict()) == constraints


def test_stock_cap_binds_at_the_price_that_sells_the_stock() -> None:
    data = case("poisson")
    free = optimal_price(data.fit, unit_cost=data.cost)
    stock = 0.8 * free.recommended.units
    capped = optimal_price(
        data.fit, unit_cost=data.cost, constraints=PriceConstraints(max_units=stock)
    )
    assert capped.binding_constraints == ("max_units",)
    assert capped.recommended.units == pytest.approx(stock, rel=1e-9)
    assert capped.recommended.price > free.recommended.price


@settings(
    max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow], derandomize=True
)
@given(
    form=st.sampled_from(FORMS),
    objective=st.sampled_from(["profit", "revenue"]),
    low=st.one_of(st.none(), st.floats(6.0, 11.0)),
    width=st.one_of(st.none(), st.floats(0.0, 6.0)),
    change=st.one_of(st.none(), st.floats(0.0, 30.0)),
    margin=st.one_of(st.none(), st.floats(-20.0, 70.0)),
    units_cap=st.one_of(st.none(), st.floats(20.0, 300.0)),
    units_floor=st.one_of(st.none(), st.floats(0.0, 200.0)),
    grid=st.sampled_from([None, "step", "endings"]),
)
def test_no_constraint_is_ever_violated(
    form: str,
    objective: str,
    low: float | None,
    width: float | None,
    change: float | None,
    margin: float | None,
    units_cap: float | None,
    units_floor: float | None,
    grid: str | None,
) -> None:
    constraints = PriceConstraints(
        min_price=low,
        max_price=None if width is None else (low or 6.0) + width,
        max_change_pct=change,
        min_margin_pct=margin,
        max_units=units_cap,
        min_units=units_floor,
        price_step=0.1 if grid == "step" else None,
        price_endings=(0.45, 0.95) if grid == "endings" else (),
    )
    try:
        check(form, objective, constraints)
    except InfeasibleConstraintsError as error:
        assert error.constraints, error
        data = case(form)
        allowed = allowed_mask(constraints, data.fit, data.cost, data.current)
        lo, hi = data.fit.price_range
        prices = np.linspace(0.9 * lo, 1.1 * hi, 100_001)
        if constraints.grid_name is not None:
            prices = allowed_grid(constraints, 0.9 * lo, 1.1 * hi)
        assert not allowed(prices).any(), error


def test_curve_points_for_plotting() -> None:
    data = case("semi-log")
    result = optimal_price(
        data.fit, unit_cost=data.cost, current_price=data.current, curve_points=80
    )
    assert result.curve is not None and len(result.curve) == 80
    prices = [p.price for p in result.curve]
    assert prices == sorted(prices)
    low, high = result.feasible_range
    assert prices[0] <= min(low, data.current) and prices[-1] >= (high or 0.0)
    for point in result.curve[::20]:
        expected = predict(data.fit, price=point.price, unit_cost=data.cost)
        assert point.units == pytest.approx(expected.expected_units, rel=1e-12)
        assert point.profit == pytest.approx(expected.profit, rel=1e-12)
        assert point.feasible == (low <= point.price <= (high or math.inf))
    with pytest.raises(PricingInputError, match="curve_points"):
        optimal_price(data.fit, unit_cost=data.cost, curve_points=10)


def test_invalid_constraint_values_are_listed_together() -> None:
    with pytest.raises(InvalidConstraintsError) as info:
        PriceConstraints(price_step=-0.05, price_endings=(1.2,), min_margin_pct=100.0)
    fields = {name for name, _ in info.value.problems}
    assert fields == {"price_step", "price_endings", "min_margin_pct"}
    with pytest.raises(InvalidConstraintsError, match="either price_step or price_endings"):
        PriceConstraints(price_step=0.05, price_endings=(0.99,))
    with pytest.raises(InvalidConstraintsError) as info:
        PriceConstraints.from_dict({"max_price": "ten", "colour": 1, "allow_extrapolation": 1})
    assert {n for n, _ in info.value.problems} == {"max_price", "colour", "allow_extrapolation"}
    given = {"min_price": 4.0, "price_endings": [0.99, 0.49], "allow_extrapolation": True}
    built = PriceConstraints.from_dict(given)
    assert built.price_endings == (0.49, 0.99)
    assert PriceConstraints.from_dict(json.loads(json.dumps(built.to_dict()))) == built
