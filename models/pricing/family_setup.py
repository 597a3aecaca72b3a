"""A family's pricing problem from the caller's input, and its solution.

:func:`prepare_family` checks the input and builds the continuous problem
(:mod:`models.pricing.joint_problem`); :func:`solve_family` solves it by SLSQP from
three starting points, searches allowed-price grids (:mod:`models.pricing.joint_grid`)
and re-optimises the products without a grid around the chosen grid prices.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from models._typing import FloatArray
from models.errors import MissingUnitCostError, PricingInputError, UnboundedObjectiveError
from models.pricing.constraints import PriceConstraints, interval, price_limits
from models.pricing.inputs import check_signs, check_value
from models.pricing.joint import FamilyDemand
from models.pricing.joint_draws import Search
from models.pricing.joint_grid import grid_search
from models.pricing.joint_problem import (
    FEASIBLE,
    JointProblem,
    JointProduct,
    Solved,
    propagate_order,
    raise_infeasible,
    solve_slsqp,
    split_scenario,
    starting_points,
)
from models.pricing.solve1d import SEARCH_SPAN
from models.result import DemandFit


@dataclass(frozen=True)
class FamilySetup:
    """A family's checked input and its continuous problem, products in sku order."""

    objective: str
    fits: list[DemandFit]
    values: list[dict[str, float]]
    demand: FamilyDemand
    problem: JointProblem
    search: Search
    wrong_signed: frozenset[str]
    no_current: list[str]
    current: FloatArray

    @property
    def products(self) -> tuple[JointProduct, ...]:
        return self.problem.products


def _order_pairs(order: Sequence[tuple[str, str]], skus: list[str]) -> tuple[tuple[int, int], ...]:
    pairs = []
    for pair in order:
        if len(pair) != 2:
            raise PricingInputError(f"order entries must be pairs [a, b]; got {pair!r}")
        a, b = pair
        unknown = [s for s in (a, b) if s not in skus]
        if unknown:
            raise PricingInputError(f"order names {unknown}, which are not in the family {skus}")
        if a == b:
            raise PricingInputError(f"order pair [{a}, {b}] names the same product twice")
        pairs.append((skus.index(a), skus.index(b)))
    return tuple(pairs)


def _check_needs(
    objective: str,
    skus: list[str],
    rules: Mapping[str, PriceConstraints],
    costs: Mapping[str, float | None],
    currents: Mapping[str, float | None],
    cap: float | None,
) -> None:
    missing = [s for s in skus if costs[s] is None]
    if objective == "profit" and missing:
        raise MissingUnitCostError(missing, "objective=profit")
    margin = [s for s in missing if rules[s].min_margin_pct is not None]
    if margin:
        raise MissingUnitCostError(margin, "min_margin_pct")
    for s in skus:
        if rules[s].max_change_pct is not None and currents[s] is None:
            raise PricingInputError(f"{s}: max_change_pct needs the current price")
    no_current = [s for s in skus if currents[s] is None]
    if cap is not None and no_current:
        raise PricingInputError(
            f"max_total_change_pct needs every current price; missing for {', '.join(no_current)}"
        )


def prepare_family(
    fits: Mapping[str, DemandFit],
    objective: str,
    unit_costs: Mapping[str, float | None],
    current_prices: Mapping[str, float | None],
    constraints: Mapping[str, PriceConstraints],
    order: Sequence[tuple[str, str]],
    max_total_change_pct: float | None,
    scenario: Mapping[str, Any] | None,
    allow_wrong_sign: bool,
) -> FamilySetup:
    """Check the caller's input (a :class:`PricingInputError` per problem) and build the problem."""
    skus = sorted(fits)
    if not skus:
        raise PricingInputError("a family needs at least one product")
    for sku in skus:
        if fits[sku].sku != sku:
            raise PricingInputError(f"the fit given for {sku} belongs to {fits[sku].sku}")
    unknown = sorted(set(constraints) - set(skus))
    if unknown:
        raise PricingInputError(f"constraints name products outside the family: {unknown}")
    rules = {s: constraints.get(s) or PriceConstraints() for s in skus}
    costs = {s: check_value(f"{s}.unit_cost", unit_costs.get(s), positive=False) for s in skus}
    currents = {
        s: check_value(f"{s}.current_price", current_prices.get(s), positive=True) for s in skus
    }
    cap = check_value("max_total_change_pct", max_total_change_pct, positive=False)
    _check_needs(objective, skus, rules, costs, currents, cap)
    pairs = _order_pairs(order, skus)
    fit_list = [fits[s] for s in skus]
    wrong_signed = frozenset(check_signs(fit_list, allow_wrong_sign=allow_wrong_sign))
    values = split_scenario(fit_list, scenario)
    demand = FamilyDemand.from_fits(fit_list, values)

    products = []
    for s, fit in zip(skus, fit_list, strict=True):
        lower, upper = price_limits(
            rules[s], unit_cost=costs[s], current_price=currents[s], price_range=fit.price_range
        )
        reference = currents[s] or math.sqrt(fit.price_range[0] * fit.price_range[1])
        box = interval(lower, upper, label=s, prefix=f"{s}.")
        products.append(JointProduct(s, fit, costs[s], currents[s], rules[s], box, reference))
    refs = np.array([p.reference for p in products])
    open_low = np.array([not p.box.low > 0.0 for p in products])
    open_high = np.array([math.isinf(p.box.high) for p in products])
    search = Search(
        low=np.where(open_low, refs / SEARCH_SPAN, [p.box.low for p in products]),
        high=np.where(open_high, refs * SEARCH_SPAN, [p.box.high for p in products]),
        open_low=open_low,
        open_high=open_high,
    )
    problem = JointProblem(
        products=tuple(products),
        costs=np.array([(p.unit_cost or 0.0) if objective == "profit" else 0.0 for p in products]),
        low=search.low,
        high=search.high,
        order=pairs,
    )
    current = np.array([currents[s] if currents[s] is not None else np.nan for s in skus])
    if cap is not None:
        weights = demand.units(current)
        problem.weights = weights if weights.sum() > 0.0 else np.ones(len(skus))
        problem.index_base = float(problem.weights @ current)
        problem.index_cap = cap / 100.0
    for i, p in enumerate(products):
        if p.constraints.max_units is not None:
            problem.caps.append((i, float(p.constraints.max_units), True))
        if p.constraints.min_units is not None and p.constraints.min_units > 0.0:
            problem.caps.append((i, float(p.constraints.min_units), False))
    no_current = [s for s in skus if currents[s] is None]
    return FamilySetup(
        objective, fit_list, values, demand, problem, search, wrong_signed, no_current, current
    )


def _check_bounded(setup: FamilySetup, prices: FloatArray) -> None:
    """Raise when a price sits on an open search end with the objective still improving."""
    _, gradient = setup.demand.objective_and_gradient(prices, setup.problem.costs)
    search = setup.search
    for i, p in enumerate(setup.products):
        if search.open_high[i] and prices[i] >= search.high[i] * (1 - 1e-9) and gradient[i] > 0:
            raise UnboundedObjectiveError(
                p.sku,
                "above",
                f"{p.sku}: the family {setup.objective} grows without limit as this price rises "
                "and no constraint caps it: set max_price or max_change_pct, or keep the "
                "observed-range guard",
            )
        if search.open_low[i] and prices[i] <= search.low[i] * (1 + 1e-9) and gradient[i] < 0:
            raise UnboundedObjectiveError(
                p.sku,
                "below",
                f"{p.sku}: the family {setup.objective} grows without limit as this price falls "
                "and no constraint sets a floor: set min_price, min_margin_pct or max_change_pct",
            )


def solve_family(setup: FamilySetup) -> tuple[Solved, FloatArray, int, str]:
    """Continuous solution, recommended prices (after grids), iterations and method."""
    problem, demand, search = setup.problem, setup.demand, setup.search
    tight_low, tight_high = propagate_order(problem)
    starts = starting_points(problem, demand, tight_low, tight_high)
    solved = solve_slsqp(problem, demand, search.low, search.high, starts)
    if solved.violation > FEASIBLE:
        raise_infeasible(problem, demand, solved)
    _check_bounded(setup, solved.prices)
    if not any(p.constraints.grid_name for p in setup.products):
        return solved, solved.prices, solved.nit, "continuous"
    prices, count, method = grid_search(problem, demand, solved.prices, search.low, search.high)
    if any(p.constraints.grid_name is None for p in setup.products):
        # Re-optimise the products without a grid around the chosen grid prices.
        gridded = np.array([p.constraints.grid_name is not None for p in setup.products])
        low = np.where(gridded, prices, search.low)
        high = np.where(gridded, prices, search.high)
        again = solve_slsqp(problem, demand, low, high, [prices])
        if again.violation <= FEASIBLE and again.value >= demand.objective(prices, problem.costs):
            prices = again.prices
    return solved, prices, count, method
