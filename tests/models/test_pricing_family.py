"""Joint family pricing against brute-force grid searches, ladder rules and edge cases.

Families are fitted on exact data from known cross-price demand curves; the brute force
evaluates the fitted equations independently (tests.plugins.pricing_cases) on a grid over
the allowed box and keeps the allowed points.
"""

from __future__ import annotations

import json
from collections.abc import Callable, Mapping

import numpy as np
import pytest

from models import (
    DemandFit,
    InfeasibleConstraintsError,
    MissingUnitCostError,
    ModelSpec,
    PriceConstraints,
    PricingInputError,
    WrongSignError,
    fit_demand,
    generate_catalogue,
    optimal_family_prices,
    optimal_price,
    simulate_product,
)
from models.scenario import COVARIATES, LOG_COVARIATES
from tests.plugins.pricing_cases import (
    COSTS,
    exact_fit,
    expected_units,
    family_prices,
    three_mixed,
    two_linear,
    two_power,
)


def family_value(
    fits: Mapping[str, DemandFit], prices: Mapping[str, np.ndarray], costs: Mapping[str, float]
) -> np.ndarray:
    """Total objective of the fitted family at price arrays (independent evaluation)."""
    total = np.zeros(np.broadcast(*prices.values()).shape)
    for sku, fit in fits.items():
        others = {k: v for k, v in prices.items() if k != sku and k in fit.variable_latest}
        total = total + (prices[sku] - costs[sku]) * expected_units(fit, prices[sku], others)
    return total


def guard(fit: DemandFit) -> tuple[float, float]:
    low, high = fit.price_range
    return 0.9 * low, 1.1 * high


def brute(
    fits: Mapping[str, DemandFit],
    costs: Mapping[str, float],
    points: int,
    allowed: Callable[[dict[str, np.ndarray]], np.ndarray] | None = None,
    grids: Mapping[str, np.ndarray] | None = None,
) -> tuple[dict[str, float], float, dict[str, float]]:
    """Best allowed point of a grid over the guard boxes: prices, value and grid steps."""
    axes = {
        sku: (grids or {}).get(sku, np.linspace(*guard(fit), points)) for sku, fit in fits.items()
    }
    mesh = dict(zip(axes, np.meshgrid(*axes.values(), indexing="ij"), strict=True))
    values = family_value(fits, mesh, costs)
    if allowed is not None:
        values = np.where(allowed(mesh), values, -np.inf)
    k = np.unravel_index(int(np.argmax(values)), values.shape)
    steps = {s: float(a[1] - a[0]) if a.size > 1 else 0.0 for s, a in axes.items()}
    return {s: float(mesh[s][k]) for s in axes}, float(values[k]), steps


def prices_of(result) -> dict[str, float]:
    return {p.sku: p.recommended.price for p in result.products}


def assert_matches(fits, costs, result, found, best, steps, factor: float = 3.0) -> None:
    mine = prices_of(result)
    value = float(family_value(fits, {k: np.array(v) for k, v in mine.items()}, costs))
    assert value >= best - 1e-9 * abs(best), (mine, found)
    for sku in fits:
        assert abs(mine[sku] - found[sku]) <= factor * steps[sku] + 1e-12, (mine, found)


@pytest.mark.parametrize("family", [two_linear, two_power])
@pytest.mark.parametrize("objective", ["profit", "revenue"])
def test_two_products_match_brute_force(family, objective: str) -> None:
    fits = family()
    costs = {s: COSTS[s] if objective == "profit" else 0.0 for s in fits}
    result = optimal_family_prices(
        fits, objective=objective, unit_costs={s: COSTS[s] for s in fits}
    )
    json.dumps(result.to_dict(), allow_nan=False)
    found, best, steps = brute(fits, costs, 1201)
    assert_matches(fits, costs, result, found, best, steps)
    assert result.total.recommended.revenue == pytest.approx(
        sum(p.recommended.revenue for p in result.products)
    )


def test_three_products_match_brute_force() -> None:
    fits = three_mixed()
    result = optimal_family_prices(
        fits, unit_costs=COSTS, current_prices={"A": 8, "B": 10, "C": 13}
    )
    found, best, steps = brute(fits, COSTS, 161)
    assert_matches(fits, COSTS, result, found, best, steps)
    assert result.total.current is not None
    assert result.total.objective_change_pct is not None and result.total.objective_change_pct >= 0


def test_ladder_rules_hold_and_bind() -> None:
    fits = three_mixed()
    free = prices_of(optimal_family_prices(fits, unit_costs=COSTS))
    assert free["A"] < free["B"] < free["C"]  # so ranking them the other way must bind
    order = [("C", "B"), ("B", "A")]
    result = optimal_family_prices(fits, unit_costs=COSTS, order=order)
    mine = prices_of(result)
    assert mine["C"] <= mine["B"] * (1 + 1e-9) and mine["B"] <= mine["A"] * (1 + 1e-9)
    assert set(result.binding_constraints) >= {"order:B<=A"}
    assert "order" in result.product("A").binding_constraints

    def allowed(m: dict[str, np.ndarray]) -> np.ndarray:
        return (m["C"] <= m["B"]) & (m["B"] <= m["A"])

    found, best, steps = brute(fits, COSTS, 161, allowed)
    assert_matches(fits, COSTS, result, found, best, steps)


def test_price_index_cap() -> None:
    fits = two_linear()
    current = {"A": 12.0, "B": 14.0}
    free = optimal_family_prices(fits, unit_costs=COSTS, current_prices=current)
    assert abs(free.total.price_index_change_pct or 0.0) > 3.0
    result = optimal_family_prices(
        fits, unit_costs=COSTS, current_prices=current, max_total_change_pct=3.0
    )
    assert abs(result.total.price_index_change_pct or 0.0) == pytest.approx(3.0, rel=1e-6)
    assert result.binding_constraints == ("max_total_change_pct",)
    weights = np.array([p.current.units for p in free.products])
    base = weights @ np.array([12.0, 14.0])

    def allowed(m: dict[str, np.ndarray]) -> np.ndarray:
        index = (weights[0] * m["A"] + weights[1] * m["B"]) / base
        return np.abs(index - 1.0) <= 0.03

    found, best, steps = brute(fits, COSTS, 1201, allowed)
    assert_matches(fits, COSTS, result, found, best, steps)


def test_units_cap_in_a_family() -> None:
    fits = two_linear()
    free = optimal_family_prices(fits, unit_costs=COSTS)
    cap = 0.8 * free.product("A").recommended.units
    rules = {"A": PriceConstraints(max_units=cap)}
    result = optimal_family_prices(fits, unit_costs=COSTS, constraints=rules)
    assert result.product("A").recommended.units == pytest.approx(cap, rel=1e-7)
    assert "max_units" in result.product("A").binding_constraints

    def allowed(m: dict[str, np.ndarray]) -> np.ndarray:
        return expected_units(fits["A"], m["A"], {"B": m["B"]}) <= cap

    found, best, steps = brute(fits, COSTS, 1201, allowed)
    assert_matches(fits, COSTS, result, found, best, steps)


def test_allowed_price_grids_are_searched_exactly() -> None:
    fits = three_mixed()
    rules = {
        "A": PriceConstraints(price_endings=(0.49, 0.99)),
        "B": PriceConstraints(price_step=0.25),
        "C": PriceConstraints(price_endings=(0.95,)),
    }
    result = optimal_family_prices(fits, unit_costs=COSTS, constraints=rules, order=[("A", "B")])
    assert result.search == "allowed_prices"
    grids = {}
    for sku, fit in fits.items():
        low, high = guard(fit)
        whole = np.arange(np.floor(low), np.ceil(high) + 1)
        if sku == "B":
            candidates = np.round(
                np.arange(np.ceil(low / 0.25), np.floor(high / 0.25) + 1) * 0.25, 10
            )
        else:
            endings = np.array(rules[sku].price_endings)
            candidates = np.round((whole[:, None] + endings).ravel(), 10)
        grids[sku] = candidates[(candidates >= low) & (candidates <= high)]

    def allowed(m: dict[str, np.ndarray]) -> np.ndarray:
        return m["A"] <= m["B"]

    found, best, _ = brute(fits, COSTS, 0, allowed, grids)
    assert prices_of(result) == found


def test_joint_prices_beat_separate_prices() -> None:
    # Joint optimisation with cross-elasticities beats pricing each product alone
    # (field notes: product relationships; Reibstein & Gatignon 1984).
    fits = two_linear()
    current = {"A": 11.0, "B": 12.0}
    joint = optimal_family_prices(fits, unit_costs=COSTS, current_prices=current)
    separate = {
        sku: optimal_price(
            fit,
            unit_cost=COSTS[sku],
            scenario={k: v for k, v in current.items() if k != sku},
        ).recommended.price
        for sku, fit in fits.items()
    }
    arrays = {k: np.array(v) for k, v in separate.items()}
    assert joint.total.recommended.profit > float(family_value(fits, arrays, COSTS)) + 1.0


def test_family_of_one_equals_the_single_product_answer() -> None:
    fit = three_mixed()["A"]
    single = optimal_price(fit, unit_cost=4.0, current_price=8.0, scenario={"B": 11.0})
    family = optimal_family_prices(
        {"A": fit}, unit_costs={"A": 4.0}, current_prices={"A": 8.0}, scenario={"B": 11.0}
    )
    assert family.products[0].recommended.price == pytest.approx(single.recommended.price, rel=1e-7)
    assert family.products[0].binding_constraints == single.binding_constraints


def test_cross_price_pressure_is_reported() -> None:
    # Raising B moves demand to A without limit in a constant-elasticity family, so B
    # sits on its upper guard because of the family objective.
    result = optimal_family_prices(two_power(), unit_costs=COSTS)
    b = result.product("B")
    assert b.binding_constraints == ("observed_price_range",)
    assert b.unconstrained_price is None
    note = {w.code: w.message for w in b.warnings}["objective_unbounded_above"]
    assert "cross-price effects" in note


def test_infeasible_ladder_names_the_rule_and_the_limits() -> None:
    fits = two_linear()
    rules = {"A": PriceConstraints(min_price=13.0), "B": PriceConstraints(max_price=12.0)}
    with pytest.raises(InfeasibleConstraintsError) as info:
        optimal_family_prices(fits, unit_costs=COSTS, constraints=rules, order=[("A", "B")])
    assert set(info.value.constraints) >= {"order:A<=B", "A.min_price", "B.max_price"}
    assert "ladder" in str(info.value)
    with pytest.raises(InfeasibleConstraintsError) as info:
        optimal_family_prices(
            fits, unit_costs=COSTS, constraints={"A": PriceConstraints(min_price=9, max_price=8)}
        )
    assert info.value.constraints == ["A.min_price", "A.max_price"]
    assert str(info.value).startswith("A: no price satisfies every constraint")


def test_family_errors() -> None:
    fits = two_linear()
    with pytest.raises(MissingUnitCostError) as info:
        optimal_family_prices(fits, unit_costs={"A": 4.0})
    assert info.value.skus == ["B"]
    with pytest.raises(PricingInputError, match="priced by this optimisation"):
        optimal_family_prices(fits, unit_costs=COSTS, scenario={"B": 10.0})
    with pytest.raises(PricingInputError, match="not in the family"):
        optimal_family_prices(fits, unit_costs=COSTS, order=[("A", "Z")])
    with pytest.raises(PricingInputError, match="needs every current price"):
        optimal_family_prices(fits, unit_costs=COSTS, max_total_change_pct=5.0)
    wrong = dict(fits)
    pa = family_prices(9, 8.0, 14.0)
    wrong["A"] = exact_fit("A", "linear", pa, 20.0 + 3.0 * pa, cross_prices={"B": pa})
    with pytest.raises(WrongSignError) as sign:
        optimal_family_prices(wrong, unit_costs=COSTS)
    assert sign.value.skus == ["A"]
    forced = optimal_family_prices(wrong, unit_costs=COSTS, allow_wrong_sign=True)
    assert forced.product("A").warnings[0].code == "wrong_sign_allowed"


def test_family_scenario_applies_shared_and_per_product_values() -> None:
    fits = three_mixed()
    base = optimal_family_prices({"B": fits["B"], "C": fits["C"]}, unit_costs=COSTS)
    assert base.product("B").scenario["A"] == fits["B"].variable_latest["A"]
    moved = optimal_family_prices(
        {"B": fits["B"], "C": fits["C"]}, unit_costs=COSTS, scenario={"B": {"A": 9.5}}
    )
    assert moved.product("B").scenario["A"] == 9.5
    shared = optimal_family_prices(
        {"B": fits["B"], "C": fits["C"]}, unit_costs=COSTS, scenario={"A": 9.5}
    )
    assert prices_of(shared) == pytest.approx(prices_of(moved), rel=1e-9)


def test_large_family_with_endings_uses_the_local_grid_search() -> None:
    catalogue = generate_catalogue(7, n_products=50)
    fits, costs, current = {}, {}, {}
    for product in catalogue.in_family("herbal"):  # ten products, siblings' prices as terms
        spec = ModelSpec(
            form=product.truth.form,
            covariates=COVARIATES,
            log_covariates=LOG_COVARIATES,
            cross_prices=tuple(product.truth.cross_price_coefs),
        )
        fits[product.sku] = fit_demand(product.history, spec)
        costs[product.sku], current[product.sku] = product.unit_cost, product.current_price
    rules = {s: PriceConstraints(price_endings=(0.49, 0.99), max_change_pct=25.0) for s in fits}
    result = optimal_family_prices(
        fits, unit_costs=costs, current_prices=current, constraints=rules
    )
    assert len(fits) == 10 and result.search == "allowed_prices_local"
    mine = prices_of(result)
    value = float(family_value(fits, {k: np.array(v) for k, v in mine.items()}, costs))
    for sku, fit in fits.items():
        price = mine[sku]
        assert round(price % 1.0, 2) in (0.49, 0.99)
        low, high = guard(fit)
        assert max(low, 0.75 * current[sku]) <= price <= min(high, 1.25 * current[sku])
        # No single product can move to another allowed price and do better.
        for other in np.arange(np.floor(low), np.ceil(high) + 1)[:, None] + [0.49, 0.99]:
            for candidate in other:
                if not max(low, 0.75 * current[sku]) <= candidate <= min(high, 1.25 * current[sku]):
                    continue
                trial = {k: np.array(candidate if k == sku else v) for k, v in mine.items()}
                assert float(family_value(fits, trial, costs)) <= value * (1 + 1e-12)


def test_family_value_of_knowing_adds_up_the_products_of_an_independent_family() -> None:
    # With no cross-price terms the family's best prices are each product's own, so the
    # expected family loss is the sum of the products' expected losses (linearity of
    # expectation; the value of perfect information, Raiffa and Schlaifer, Applied
    # Statistical Decision Theory, 1961). The family figure is a Monte Carlo average over
    # re-solved draws; the single-product one is Gauss-Hermite quadrature
    # (models.pricing.decide): two independent computations of one quantity.
    tins = [
        simulate_product(seed, elasticity=-2.5, sku=f"TEA-{seed}", n_periods=40, price_noise=0.03)
        for seed in (1, 2)
    ]
    fits = {p.sku: fit_demand(p.history, ModelSpec()) for p in tins}
    costs = {p.sku: p.unit_cost for p in tins}
    family = optimal_family_prices(fits, unit_costs=costs, uncertainty_draws=2000, seed=3)
    alone = [optimal_price(fits[p.sku], unit_cost=p.unit_cost, decide_by="point") for p in tins]
    for joint, single in zip(family.products, alone, strict=True):
        assert joint.recommended.price == pytest.approx(single.recommended.price, rel=1e-6)
    assert all(s.decision_figures is not None for s in alone)
    expected = sum(s.decision_figures.value_of_knowing for s in alone if s.decision_figures)
    assert expected > 0.0
    # 2000 draws: Monte Carlo error of a few percent (measured 0.7% at this seed).
    assert family.total.value_of_knowing == pytest.approx(expected, rel=0.05)
    without = optimal_family_prices(fits, unit_costs=costs)
    assert without.total.value_of_knowing is None
    assert without.total.to_dict()["value_of_knowing"] is None
