"""Joint recommended prices for the products of one family: :func:`optimal_family_prices`.

The continuous problem (total profit or revenue over the family's prices, with each
product's price limits as box bounds and its units limits, the ladder rules and the cap
on the family's price index as inequality constraints) is solved by SLSQP with analytic
gradients from three starting points; the best feasible solution wins
(:mod:`models.pricing.joint_problem`). Allowed-price grids are then searched
(:mod:`models.pricing.joint_grid`), and products without a grid are re-optimised around
the chosen grid prices.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, replace
from typing import Any, Final

import numpy as np
from scipy import optimize

from models._typing import FloatArray
from models.errors import MissingUnitCostError, PricingInputError, UnboundedObjectiveError
from models.guards import price_range_warning
from models.pricing import notes
from models.pricing.constraints import PriceConstraints, interval, price_limits
from models.pricing.inputs import check_draws, check_objective, check_signs, check_value
from models.pricing.joint import FamilyDemand
from models.pricing.joint_draws import DrawFigures, Search, family_draws
from models.pricing.joint_grid import grid_search
from models.pricing.joint_problem import (
    FEASIBLE,
    JointProblem,
    JointProduct,
    Solved,
    own_curve,
    propagate_order,
    raise_infeasible,
    solve_slsqp,
    split_scenario,
    starting_points,
)
from models.pricing.result import (
    FamilyRecommendation,
    FamilyTotal,
    PricePoint,
    PriceRecommendation,
    TotalFigures,
)
from models.pricing.single import STATUS_CONSTRAINED, STATUS_INTERIOR, STATUS_UNBOUNDED
from models.pricing.solve1d import SEARCH_SPAN, at_bound, unconstrained
from models.result import DemandFit, FitWarning

_T_SEARCH: Final = np.linspace(0.0, 1.0, 97)


@dataclass(frozen=True)
class _Setup:
    objective: str
    fits: list[DemandFit]
    values: list[dict[str, float]]
    demand: FamilyDemand
    problem: JointProblem
    search: Search
    forced: frozenset[str]
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


def _prepare(
    fits: Mapping[str, DemandFit],
    objective: str,
    unit_costs: Mapping[str, float | None],
    current_prices: Mapping[str, float | None],
    constraints: Mapping[str, PriceConstraints],
    order: Sequence[tuple[str, str]],
    max_total_change_pct: float | None,
    scenario: Mapping[str, Any] | None,
    force: bool,
) -> _Setup:
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
    forced = frozenset(check_signs(fit_list, force=force))
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
    return _Setup(objective, fit_list, values, demand, problem, search, forced, no_current, current)


def _check_bounded(setup: _Setup, prices: FloatArray) -> None:
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


def _solve(setup: _Setup) -> tuple[Solved, FloatArray, int, str]:
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


def _best_response(setup: _Setup, prices: FloatArray, i: int) -> tuple[float | None, str | None]:
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
    setup: _Setup, i: int, continuous: FloatArray, recommended: FloatArray, active: list[str]
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


def _product(
    setup: _Setup,
    i: int,
    continuous: FloatArray,
    recommended: FloatArray,
    active: list[str],
    method: str,
    nit: int,
) -> PriceRecommendation:
    p = setup.products[i]
    demand = setup.demand
    binding, low, high = _binding(setup, i, continuous, recommended, active)
    free_price, direction = _best_response(setup, recommended, i)
    price = float(recommended[i])
    warnings: list[FitWarning] = []
    if p.sku in setup.forced:
        own = float(demand.coef_log[i, i] + demand.coef_level[i, i])
        warnings.append(notes.wrong_sign_forced(own))
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
        warnings.append(notes.cost_above(p.unit_cost, p.box.high, setup.objective))
    outside = price_range_warning(p.fit, price)
    if outside is not None:
        warnings.append(outside)
    point = _point(price, float(demand.units(recommended)[i]), p.unit_cost)
    if point.units <= 0.0:
        warnings.append(notes.no_demand(price))
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
        method=method,
        success=True,
        status=status,
        message=(
            f"Optimum on a constraint: {', '.join(binding)}."
            if binding
            else "Optimum found inside the allowed prices."
        ),
        nit=nit,
    )


def _totals(points: Sequence[PricePoint]) -> TotalFigures:
    profits = [p.profit for p in points]
    return TotalFigures(
        units=float(sum(p.units for p in points)),
        revenue=float(sum(p.revenue for p in points)),
        profit=None if None in profits else float(sum(v or 0.0 for v in profits)),
    )


def _total(
    setup: _Setup,
    products: Sequence[PriceRecommendation],
    recommended: FloatArray,
    figures: DrawFigures | None,
) -> FamilyTotal:
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
    )


def optimal_family_prices(
    fits: Mapping[str, DemandFit],
    *,
    objective: str = "profit",
    unit_costs: Mapping[str, float | None] | None = None,
    current_prices: Mapping[str, float | None] | None = None,
    constraints: Mapping[str, PriceConstraints] | None = None,
    order: Sequence[tuple[str, str]] = (),
    max_total_change_pct: float | None = None,
    scenario: Mapping[str, Any] | None = None,
    uncertainty_draws: int = 0,
    seed: int = 0,
    force: bool = False,
) -> FamilyRecommendation:
    """Joint prices for a family that maximise total expected profit or revenue.

    Cross-price terms naming products of the family become decision variables; other
    cross prices and covariates stay at the scenario's (default: latest) values.

    Parameters
    ----------
    fits : mapping of sku to DemandFit
    objective : {"profit", "revenue"}
    unit_costs, current_prices : mapping of sku to float or None
    constraints : mapping of sku to PriceConstraints
        Each product's rules (a missing sku gets the default observed-range guard only).
    order : sequence of (a, b)
        Price ladder rules ``price(a) <= price(b)``.
    max_total_change_pct : float, optional
        Cap, in percent, on the move of the family's price index
        ``sum(w * p) / sum(w * p_current)`` whose weights ``w`` are the expected units
        at the current prices (a fixed-basket index); needs every current price.
    scenario : mapping, optional
        Shared values (``{"rival_price": 1.05}``) apply to every fit that has the
        variable; ``{sku: {...}}`` entries apply to one product.
    uncertainty_draws, seed
        Coefficient draws per fit (independent across fits), each re-optimised jointly.
    force : bool
        Optimise even when an own-price effect is not negative.

    Returns
    -------
    FamilyRecommendation
        One :class:`PriceRecommendation` per sku (sku order) and the totals. A product's
        ``unconstrained_price`` is its best price for the family objective with the
        others at their recommendations and none of its own constraints.

    Raises
    ------
    WrongSignError, MissingUnitCostError, InfeasibleConstraintsError,
    UnboundedObjectiveError, PricingInputError
        As in :func:`models.optimal_price`; constraint names carry the sku
        (``"TEA-004.max_price"``) or name the rule (``"order:TEA-004<=TEA-005"``).
    """
    check_objective(objective)
    check_draws(uncertainty_draws)
    setup = _prepare(
        fits,
        objective,
        unit_costs or {},
        current_prices or {},
        constraints or {},
        order,
        max_total_change_pct,
        scenario,
        force,
    )
    problem = setup.problem
    solved, recommended, nit, method = _solve(setup)
    continuous = solved.prices
    values = problem.values(setup.demand, continuous)
    active = list(
        dict.fromkeys(n for n, v in zip(problem.names(), values, strict=True) if v <= 1e-7)
    )
    products = [
        _product(setup, i, continuous, recommended, active, method, nit)
        for i in range(len(setup.products))
    ]
    warnings: list[FitWarning] = []
    if setup.no_current:
        warnings.append(notes.no_current_figures(setup.no_current))
    figures = None
    if uncertainty_draws:
        figures = family_draws(
            problem,
            setup.fits,
            setup.values,
            continuous=continuous,
            recommended=recommended,
            search=setup.search,
            grid=method != "continuous",
            n=int(uncertainty_draws),
            seed=seed,
        )
        if figures is None:
            reason = "a fit's covariance matrix has undefined entries"
            warnings.append(notes.uncertainty_unavailable(reason))
        else:
            products = [
                replace(
                    r,
                    uncertainty=u,
                    warnings=r.warnings
                    + (
                        (notes.draws_wrong_sign(u.n_wrong_sign / u.draws),)
                        if u.n_wrong_sign
                        else ()
                    ),
                )
                for r, u in zip(products, figures.products, strict=True)
            ]
    family_binding = [n for n in active if "." not in n]
    named = family_binding + [
        f"{r.sku}.{b}"
        for r in products
        for b in r.binding_constraints
        if b not in ("order", "max_total_change_pct")
    ]
    status = max((r.status for r in products), default=STATUS_INTERIOR)
    if family_binding:
        status = max(status, STATUS_CONSTRAINED)
    message = (
        f"Optimum on constraints: {', '.join(dict.fromkeys(named))}."
        if named
        else "Optimum found inside the allowed prices."
    )
    return FamilyRecommendation(
        objective=objective,
        products=tuple(products),
        total=_total(setup, products, recommended, figures),
        order=tuple((setup.products[a].sku, setup.products[b].sku) for a, b in problem.order),
        max_total_change_pct=None if max_total_change_pct is None else float(max_total_change_pct),
        binding_constraints=tuple(family_binding),
        warnings=tuple(warnings),
        method=method,
        success=True,
        status=status,
        message=f"{message} SLSQP: {solved.message}",
        nit=nit,
    )
