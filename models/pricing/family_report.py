"""What a family's solution says about each product and about the family as a whole."""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Final

import numpy as np
from scipy import optimize

from models._typing import FloatArray
from models.guards import price_range_warning
from models.money import MoneyText, plain_money
from models.pricing import notes
from models.pricing.family_setup import FamilySetup
from models.pricing.joint_draws import DrawFigures
from models.pricing.joint_problem import (
    own_curve,
)
from models.pricing.result import (
    FamilyTotal,
    PricePoint,
    PriceRecommendation,
    TotalFigures,
)
from models.pricing.single import (
    OPTIMUM_WORDS,
    SEARCH_WORDS,
    STATUS_CONSTRAINED,
    STATUS_INTERIOR,
    STATUS_UNBOUNDED,
)
from models.pricing.solve1d import SEARCH_SPAN, at_bound, unconstrained
from models.result import FitWarning

_T_SEARCH: Final = np.linspace(0.0, 1.0, 97)


def _best_response(
    setup: FamilySetup, prices: FloatArray, i: int
) -> tuple[float | None, str | None]:
    """Product ``i``'s best price for the family objective with the siblings fixed and none
    of its own constraints: the local maximum reached by climbing from the recommendation.

    Cross-price effects make the family objective grow without limit far outside the data
    (pricing one product out of the market shifts its demand to the others), so the
    nearest local maximum is the informative one. None, with the direction, when the climb
    reaches 10,000 times (or a 10,000th of) the reference price still improving.
    """
    demand, costs = setup.demand, setup.problem.costs
    ref = setup.products[i].reference
    low, high = ref / SEARCH_SPAN, ref * SEARCH_SPAN
    grid = np.union1d(low * (high / low) ** _T_SEARCH, [prices[i]])
    trial = np.repeat(prices[None, :], grid.size, axis=0)
    trial[:, i] = grid
    with np.errstate(invalid="ignore"):
        values = np.nan_to_num(demand.objective(trial, costs), nan=-np.inf, posinf=np.inf)
    k = int(np.searchsorted(grid, prices[i]))
    step = 1 if k + 1 < grid.size and values[k + 1] > values[k] else -1
    while 0 <= k + step < grid.size and values[k + step] > values[k]:
        k += step
    last = grid.size - 1
    if not np.isfinite(values[k]):  # exp() overflowed: the objective explodes that way
        return None, "above" if step > 0 else "below"
    if k == last and values[last] > values[last - 1]:
        return None, "above"
    if k == 0 and values[0] > values[1]:
        return None, "below"

    def at(p: float) -> FloatArray:
        point = prices.copy()
        point[i] = p
        return point

    a, b = float(grid[max(k - 1, 0)]), float(grid[min(k + 1, last)])
    found = optimize.minimize_scalar(
        lambda p: -float(demand.objective(at(p), costs)),
        bounds=(a, b),
        method="bounded",
        options={"xatol": 1e-10 * b},
    )
    return float(found.x), None


def _point(price: float, units: float, unit_cost: float | None) -> PricePoint:
    profit = None if unit_cost is None else (price - unit_cost) * units
    margin = None if unit_cost is None else 100.0 * (price - unit_cost) / price
    return PricePoint(price, units, price * units, profit, margin)


def _binding(
    setup: FamilySetup, i: int, continuous: FloatArray, recommended: FloatArray, active: list[str]
) -> tuple[list[str], list[str], list[str]]:
    """Binding constraints of product ``i``, and those at its low and high end."""
    p = setup.products[i]
    _, gradient = setup.demand.objective_and_gradient(continuous, setup.problem.costs)
    scale = 1e-9 * max(abs(float(setup.demand.objective(continuous, setup.problem.costs))), 1e-300)
    low: list[str] = []
    high: list[str] = []
    if at_bound(float(continuous[i]), p.box.low) and gradient[i] * p.box.low < -scale:
        low = p.box.sources("low")
    if at_bound(float(continuous[i]), p.box.high) and gradient[i] * p.box.high > scale:
        high = p.box.sources("high")
    binding = low + high + [n.split(".", 1)[1] for n in active if n.startswith(f"{p.sku}.")]
    if any(n.startswith("order:") and p.sku in n[6:].split("<=") for n in active):
        binding.append("order")
    moved = p.current is not None and not at_bound(float(recommended[i]), p.current)
    if "max_total_change_pct" in active and moved:
        binding.append("max_total_change_pct")
    grid = p.constraints.grid_name
    if grid is not None and not at_bound(float(recommended[i]), float(continuous[i])):
        binding.append(grid)
    return binding, low, high


def product_recommendation(
    setup: FamilySetup,
    i: int,
    continuous: FloatArray,
    recommended: FloatArray,
    active: list[str],
    method: str,
    nit: int,
    money: MoneyText = plain_money,
) -> PriceRecommendation:
    """Product ``i``'s recommendation: figures, binding constraints, warnings (amounts
    written by ``money``) and status."""
    p = setup.products[i]
    demand = setup.demand
    binding, low, high = _binding(setup, i, continuous, recommended, active)
    free_price, direction = _best_response(setup, recommended, i)
    price = float(recommended[i])
    warnings: list[FitWarning] = []
    if p.sku in setup.wrong_signed:
        own = float(demand.coef_log[i, i] + demand.coef_level[i, i])
        warnings.append(notes.wrong_sign_allowed(own))
    bound_note = None
    side = high if direction == "above" else low
    if direction is not None and side:
        curve = own_curve(demand, recommended, i)
        alone = unconstrained(curve, float(setup.problem.costs[i]), p.reference)
        bound_note = notes.unbounded(
            direction,
            setup.objective,
            float(curve.elasticity(price)),
            side,
            through_siblings=alone.direction != direction,
        )
    if bound_note is not None:
        warnings.append(bound_note)
    if p.unit_cost is not None and math.isfinite(p.box.high) and p.unit_cost >= p.box.high:
        warnings.append(notes.cost_above(p.unit_cost, p.box.high, setup.objective, money))
    outside = price_range_warning(p.fit, price, money)
    if outside is not None:
        warnings.append(outside)
    point = _point(price, float(demand.units(recommended)[i]), p.unit_cost)
    if point.units <= 0.0:
        warnings.append(notes.no_demand(price, money))
    current = None
    if not setup.no_current and p.current is not None:
        current = _point(p.current, float(demand.units(setup.current)[i]), p.unit_cost)
    status = (
        STATUS_UNBOUNDED
        if bound_note is not None
        else STATUS_CONSTRAINED
        if binding
        else STATUS_INTERIOR
    )
    return PriceRecommendation(
        sku=p.sku,
        form=p.fit.form,
        objective=setup.objective,
        unit_cost=p.unit_cost,
        current=current,
        recommended=point,
        change_pct=None if p.current is None else 100.0 * (price / p.current - 1.0),
        unconstrained_price=free_price,
        binding_constraints=tuple(binding),
        feasible_range=(p.box.low, p.box.high if math.isfinite(p.box.high) else None),
        uncertainty=None,
        warnings=tuple(warnings),
        curve=None,
        scenario={k: v for k, v in setup.values[i].items() if k not in setup.demand.skus},
        optimum=OPTIMUM_WORDS[status],
        search=SEARCH_WORDS[method],
        search_steps=nit,
        summary=(
            f"Optimum held by a constraint: {', '.join(binding)}."
            if binding
            else "Optimum found inside the allowed prices."
        ),
    )


def _totals(points: Sequence[PricePoint]) -> TotalFigures:
    profits = [p.profit for p in points]
    return TotalFigures(
        units=float(sum(p.units for p in points)),
        revenue=float(sum(p.revenue for p in points)),
        profit=None if None in profits else float(sum(v or 0.0 for v in profits)),
    )


def family_total(
    setup: FamilySetup,
    products: Sequence[PriceRecommendation],
    recommended: FloatArray,
    figures: DrawFigures | None,
) -> FamilyTotal:
    """The family's totals before and after, and how its objective and price index move."""
    after = _totals([r.recommended for r in products])
    before = None if setup.no_current else _totals([r.current for r in products if r.current])
    change = index_change = None
    if before is not None:
        old = before.profit if setup.objective == "profit" else before.revenue
        new = after.profit if setup.objective == "profit" else after.revenue
        if old is not None and new is not None and old != 0.0:
            change = 100.0 * (new - old) / abs(old)
        weights = setup.problem.weights
        if weights is None:
            weights = setup.demand.units(setup.current)
        base = float(weights @ setup.current)
        if base > 0.0:
            index_change = 100.0 * (float(weights @ recommended) / base - 1.0)
    return FamilyTotal(
        current=before,
        recommended=after,
        objective_change_pct=change,
        price_index_change_pct=index_change,
        profit_interval=None if figures is None else figures.profit_interval,
        revenue_interval=None if figures is None else figures.revenue_interval,
        prob_better_than_current=None if figures is None else figures.prob_better,
        value_of_knowing=None if figures is None else figures.value_of_knowing,
    )
