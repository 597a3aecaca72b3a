"""Coefficient uncertainty carried into one product's recommended price.

Coefficient vectors are drawn from N(params, cov) with a seeded generator; the curve of
every draw is evaluated at once (arrays with one row per draw), each draw's allowed
interval is rebuilt (units limits move with the draw), and each draw's optimum is found
by a vectorised grid search and bisection on the first-order condition, or by exact
search over the allowed grid.
"""

from __future__ import annotations

import math
from collections.abc import Mapping

import numpy as np

from models._typing import FloatArray
from models.pricing import notes
from models.pricing.constraints import PriceConstraints, grid_prices, price_limits
from models.pricing.curve import DemandCurve
from models.pricing.inputs import INTERVAL_LEVEL, coefficient_draws, interval
from models.pricing.limits import units_limits
from models.pricing.result import PriceUncertainty
from models.pricing.solve1d import SEARCH_SPAN, maximise_batch
from models.result import DemandFit, FitWarning


def draw_prices(
    batch: DemandCurve,
    fit: DemandFit,
    constraints: PriceConstraints,
    *,
    cost: float,
    unit_cost: float | None,
    current_price: float | None,
    reference: float,
) -> tuple[FloatArray, FloatArray, FloatArray]:
    """Optimal price per draw (NaN where none) with infeasible and unbounded masks."""
    lower, upper = price_limits(
        constraints, unit_cost=unit_cost, current_price=current_price, price_range=fit.price_range
    )
    n = np.asarray(batch.coef).shape[0]
    low = np.full(n, max((b.value for b in lower), default=0.0))
    high = np.full(n, min((b.value for b in upper), default=math.inf))
    for _, lo, hi in units_limits(batch, constraints):
        low = np.maximum(low, lo[:, 0])
        high = np.minimum(high, hi[:, 0])
    infeasible = ~(low <= high * (1.0 + 1e-12)) | ~(high > 0.0) | np.isinf(low)
    prices = np.full(n, np.nan)
    unbounded = np.zeros(n, dtype=bool)
    ok = ~infeasible
    grid = (
        grid_prices(constraints, float(low[ok].min()), float(high[ok].max())) if ok.any() else None
    )
    if grid is not None:
        values = batch.objective(grid[None, :], cost)
        allowed = (grid[None, :] >= low[:, None] * (1 - 1e-9)) & (
            grid[None, :] <= high[:, None] * (1 + 1e-9)
        )
        values = np.where(allowed, values, -np.inf)
        has = allowed.any(axis=1) & ok
        infeasible |= ~has
        prices[has] = grid[np.argmax(values[has], axis=1)]
        return prices, infeasible, unbounded
    floor, ceiling = reference / SEARCH_SPAN, reference * SEARCH_SPAN
    search_low = np.where(low > 0.0, low, floor)
    search_high = np.where(np.isfinite(high), high, ceiling)
    if ok.any():
        sub = DemandCurve(
            batch.sku,
            batch.form,
            np.asarray(batch.offset)[ok],
            np.asarray(batch.coef)[ok],
            batch.log_price,
            batch.linear,
        )
        prices[ok] = maximise_batch(sub, cost, search_low[ok], search_high[ok])
    unbounded = ok & (
        (~np.isfinite(high) & (prices >= ceiling * (1 - 1e-9)))
        | (~(low > 0.0) & (prices <= floor * (1 + 1e-9)))
    )
    prices[unbounded] = np.nan
    return prices, infeasible, unbounded


def draw_uncertainty(
    fit: DemandFit,
    scenario: Mapping[str, float] | None,
    constraints: PriceConstraints,
    *,
    objective: str,
    unit_cost: float | None,
    current_price: float | None,
    recommended: float,
    reference: float,
    n: int,
    seed: int,
) -> tuple[PriceUncertainty | None, list[FitWarning]]:
    draws = coefficient_draws(fit, n, np.random.default_rng(seed))
    if draws is None:
        reason = "the fit's covariance matrix has undefined entries"
        return None, [notes.uncertainty_unavailable(reason)]
    batch = DemandCurve.from_fit(fit, scenario, params=draws)
    cost = unit_cost if objective == "profit" and unit_cost is not None else 0.0
    prices, infeasible, unbounded = draw_prices(
        batch,
        fit,
        constraints,
        cost=cost,
        unit_cost=unit_cost,
        current_price=current_price,
        reference=reference,
    )
    units_at = batch.units(recommended)[:, 0]
    better = None
    if current_price is not None:
        gain = batch.objective(recommended, cost)[:, 0] - batch.objective(current_price, cost)[:, 0]
        better = float(np.mean(gain > 0.0))
    wrong = int(np.sum(np.asarray(batch.coef)[:, 0] >= 0.0))
    used = np.isfinite(prices)
    result = PriceUncertainty(
        draws=n,
        level=INTERVAL_LEVEL,
        price_interval=interval(prices[used]),
        profit_interval=(
            None if unit_cost is None else interval((recommended - unit_cost) * units_at)
        ),
        revenue_interval=interval(recommended * units_at),
        prob_better_than_current=better,
        n_used=int(used.sum()),
        n_wrong_sign=wrong,
        n_infeasible=int(infeasible.sum()),
        n_unbounded=int(unbounded.sum()),
    )
    return result, ([notes.wrong_sign_draws(wrong, n)] if wrong else [])
