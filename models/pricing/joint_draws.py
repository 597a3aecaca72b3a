"""Coefficient uncertainty carried into a family's joint prices.

Each fit's coefficients are drawn from N(params, cov), independently across fits (they
are estimated separately); every draw's joint problem is re-solved by SLSQP started
from the point solution, and on allowed-price grids by the local grid search.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np

from models._typing import BoolArray, FloatArray
from models.errors import InfeasibleConstraintsError
from models.pricing.inputs import INTERVAL_LEVEL, coefficient_draws, interval
from models.pricing.joint import FamilyDemand
from models.pricing.joint_grid import grid_search
from models.pricing.joint_problem import FEASIBLE, JointProblem, solve_slsqp
from models.pricing.result import PriceUncertainty
from models.result import DemandFit


@dataclass(frozen=True)
class DrawFigures:
    """Per-product uncertainty and family totals from the draws."""

    products: list[PriceUncertainty]
    profit_interval: tuple[float, float] | None
    revenue_interval: tuple[float, float] | None
    prob_better: float | None
    value_of_knowing: float | None = None


@dataclass(frozen=True)
class Search:
    """The solver box and which of its ends no constraint set."""

    low: FloatArray
    high: FloatArray
    open_low: BoolArray
    open_high: BoolArray


def _optimum(
    problem: JointProblem, demand: FamilyDemand, start: FloatArray, search: Search, grid: bool
) -> tuple[FloatArray | None, str]:
    solved = solve_slsqp(problem, demand, search.low, search.high, [start])
    if solved.violation > FEASIBLE:
        return None, "infeasible"
    prices = solved.prices
    at_cap = (search.open_high & (prices >= search.high * (1 - 1e-9))) | (
        search.open_low & (prices <= search.low * (1 + 1e-9))
    )
    if at_cap.any():
        return None, "unbounded"
    if grid:
        try:
            prices = grid_search(
                problem, demand, prices, search.low, search.high, exhaustive_limit=0
            )[0]
        except InfeasibleConstraintsError:
            return None, "infeasible"
    return prices, "ok"


def family_draws(
    problem: JointProblem,
    fits: Sequence[DemandFit],
    values: Sequence[Mapping[str, float]],
    *,
    continuous: FloatArray,
    recommended: FloatArray,
    search: Search,
    grid: bool,
    n: int,
    seed: int,
) -> DrawFigures | None:
    """Uncertainty figures, or None when a fit's covariance is unusable."""
    rng = np.random.default_rng(seed)
    params = [coefficient_draws(fit, n, rng) for fit in fits]
    usable = [p for p in params if p is not None]
    if len(usable) < len(params):
        return None
    batch = FamilyDemand.from_fits(fits, values, params=usable)
    optimum = np.full((n, batch.n), np.nan)
    outcome = []
    for d in range(n):
        prices, status = _optimum(problem, batch.draw(d), continuous, search, grid)
        outcome.append(status)
        if prices is not None:
            optimum[d] = prices
    infeasible = outcome.count("infeasible")
    unbounded = outcome.count("unbounded")
    costs = problem.costs
    units_rec = batch.units(np.broadcast_to(recommended, (n, batch.n)).copy())
    current = np.array([p.current if p.current is not None else np.nan for p in problem.products])
    units_cur = None
    if np.all(np.isfinite(current)):
        units_cur = batch.units(np.broadcast_to(current, (n, batch.n)).copy())
    own = np.diagonal(batch.coef_log, axis1=1, axis2=2) + np.diagonal(
        batch.coef_level, axis1=1, axis2=2
    )
    products = []
    for i, product in enumerate(problem.products):
        better = None
        if units_cur is not None:
            gain = (recommended[i] - costs[i]) * units_rec[:, i] - (
                current[i] - costs[i]
            ) * units_cur[:, i]
            better = float(np.mean(gain > 0.0))
        used = np.isfinite(optimum[:, i])
        profit = None
        if product.unit_cost is not None:
            profit = interval((recommended[i] - product.unit_cost) * units_rec[:, i])
        products.append(
            PriceUncertainty(
                draws=n,
                level=INTERVAL_LEVEL,
                price_interval=interval(optimum[used, i]),
                profit_interval=profit,
                revenue_interval=interval(recommended[i] * units_rec[:, i]),
                prob_better_than_current=better,
                n_used=int(used.sum()),
                n_wrong_sign=int(np.sum(own[:, i] >= 0.0)),
                n_infeasible=infeasible,
                n_unbounded=unbounded,
            )
        )
    unit_costs = [p.unit_cost for p in problem.products]
    profit_interval = None
    if all(c is not None for c in unit_costs):
        margins = recommended - np.array([c or 0.0 for c in unit_costs])
        profit_interval = interval(np.sum(margins * units_rec, axis=1))
    prob_better = None
    if units_cur is not None:
        gain_total = np.sum((recommended - costs) * units_rec, axis=1) - np.sum(
            (current - costs) * units_cur, axis=1
        )
        prob_better = float(np.mean(gain_total > 0.0))
    return DrawFigures(
        products,
        profit_interval,
        interval(np.sum(recommended * units_rec, axis=1)),
        prob_better,
        value_of_knowing(batch, costs, optimum, recommended),
    )


def value_of_knowing(
    batch: FamilyDemand, costs: FloatArray, optimum: FloatArray, recommended: FloatArray
) -> float | None:
    """The family objective a draw's own best prices would add over the recommended ones,
    averaged over the draws whose problem was solved (None: none was).

    Each draw's gain is floored at zero: a draw's re-solved prices are a local search from
    the point solution, and where they fall short of the recommended prices the draw's
    best is at least the recommended figure. The average is therefore never above the
    value of knowing the coefficients exactly, and equal to it where every search finds its
    draw's best (the definition of the expected value of perfect information; the single-
    product figure in :mod:`models.pricing.decide` is the same quantity by quadrature).
    """
    solved = np.all(np.isfinite(optimum), axis=1)
    if not solved.any():
        return None
    chosen = np.broadcast_to(recommended, optimum.shape)
    # Every draw at once (the demand carries the draws axis); unsolved draws are left out.
    gain = batch.objective(np.where(solved[:, None], optimum, chosen), costs) - batch.objective(
        chosen.copy(), costs
    )
    return float(np.mean(np.maximum(gain[solved], 0.0)))
