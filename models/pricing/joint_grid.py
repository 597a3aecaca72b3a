"""Allowed-price grids in a family: exact search over all combinations when there are
few, else the grid neighbours of the continuous solution followed by product-by-product
improvement (each product tries every allowed price with the others fixed)."""

from __future__ import annotations

import math
from typing import Final

import numpy as np

from models._typing import FloatArray
from models.errors import InfeasibleConstraintsError
from models.pricing.constraints import grid_prices
from models.pricing.joint import FamilyDemand
from models.pricing.joint_problem import JointProblem

EXHAUSTIVE_LIMIT: Final = 200_000
"""Largest number of grid price combinations searched exhaustively."""
NEIGHBOUR_LIMIT: Final = 4096
_CHUNK: Final = 50_000
_MAX_SWEEPS: Final = 50


def _evaluate(
    problem: JointProblem, demand: FamilyDemand, prices: FloatArray
) -> tuple[FloatArray, FloatArray]:
    """Objective and feasibility of price vectors ``(m, n)``."""
    values = demand.objective(prices, problem.costs)
    cons = problem.values(demand, prices)
    ok = np.all(cons >= -1e-12, axis=-1) if cons.shape[-1] else np.ones(prices.shape[0], bool)
    return values, ok


def exhaustive(
    problem: JointProblem, demand: FamilyDemand, candidates: list[FloatArray]
) -> FloatArray | None:
    """The best feasible combination of candidate prices (None when none is feasible)."""
    shape = tuple(c.size for c in candidates)
    total = int(np.prod(shape))
    best_value, best = -math.inf, None
    for start in range(0, total, _CHUNK):
        index = np.unravel_index(np.arange(start, min(start + _CHUNK, total)), shape)
        prices = np.stack([c[k] for c, k in zip(candidates, index, strict=True)], axis=1)
        values, ok = _evaluate(problem, demand, prices)
        if ok.any():
            k = int(np.argmax(np.where(ok, values, -np.inf)))
            if values[k] > best_value:
                best_value, best = float(values[k]), prices[k]
    return best


def local(
    problem: JointProblem, demand: FamilyDemand, candidates: list[FloatArray], near: FloatArray
) -> FloatArray | None:
    """Grid neighbours of ``near`` enumerated, then product-by-product improvement."""
    nearby = []
    for c, p in zip(candidates, near, strict=True):
        k = int(np.searchsorted(c, p))
        nearby.append(c[max(k - 1, 0) : k + 1])
    start = None
    if math.prod(c.size for c in nearby) <= NEIGHBOUR_LIMIT:
        start = exhaustive(problem, demand, nearby)
    if start is None:
        start = np.array(
            [
                c[min(int(np.searchsorted(c, p)), c.size - 1)]
                for c, p in zip(candidates, near, strict=True)
            ]
        )
    current = start.copy()
    value, ok = _evaluate(problem, demand, current[None, :])
    best = float(value[0]) if ok[0] else -math.inf
    for _ in range(_MAX_SWEEPS):
        improved = False
        for i, c in enumerate(candidates):
            trial = np.repeat(current[None, :], c.size, axis=0)
            trial[:, i] = c
            values, feasible = _evaluate(problem, demand, trial)
            if feasible.any():
                k = int(np.argmax(np.where(feasible, values, -np.inf)))
                if values[k] > best + 1e-12 * abs(best):
                    best, current, improved = float(values[k]), trial[k], True
        if not improved:
            break
    return current if math.isfinite(best) else None


def grid_search(
    problem: JointProblem,
    demand: FamilyDemand,
    continuous: FloatArray,
    low: FloatArray,
    high: FloatArray,
    *,
    exhaustive_limit: int = EXHAUSTIVE_LIMIT,
) -> tuple[FloatArray, int, str]:
    """Best allowed prices (products without a grid keep their continuous price),
    the number of combinations evaluated or enumerable, and the method name."""
    candidates: list[FloatArray] = []
    for i, product in enumerate(problem.products):
        allowed = grid_prices(product.constraints, float(low[i]), float(high[i]))
        if allowed is None:
            allowed = np.array([continuous[i]])
        if allowed.size == 0:
            name = f"{product.sku}.{product.constraints.grid_name}"
            ends = product.box.sources("low") + product.box.sources("high")
            raise InfeasibleConstraintsError(
                [name, *(f"{product.sku}.{s}" for s in ends)],
                f"{product.sku}: no allowed price ({product.constraints.grid_name}) lies "
                f"between {low[i]:.6g} and {high[i]:.6g}",
            )
        candidates.append(allowed)
    total = math.prod(c.size for c in candidates)
    if total <= exhaustive_limit:
        found, method = exhaustive(problem, demand, candidates), "grid"
    else:
        found, method = local(problem, demand, candidates, continuous), "grid-local"
    if found is None:
        grids = [
            f"{p.sku}.{p.constraints.grid_name}"
            for p in problem.products
            if p.constraints.grid_name
        ]
        raise InfeasibleConstraintsError(
            grids + problem.names(),
            "no combination of allowed prices meets every family constraint "
            f"({', '.join(dict.fromkeys(grids + problem.names()))})",
        )
    return found, total, method
