"""One-dimensional maximisation of profit or revenue over an interval of prices.

A coarse geometric grid finds the best region (robust to kinks and to objectives that
are not unimodal, e.g. a wrong-signed fit priced anyway); the first-order condition
``units + (price - cost) * d units / d price = 0`` is then solved to machine precision
by Brent's method (:func:`scipy.optimize.brentq`) inside the bracket around the best
grid point. Where the bracket shows no sign change (a kink, a flat stretch), bounded
Brent minimisation (:func:`scipy.optimize.minimize_scalar`) takes over.
:func:`maximise_batch` does the same for many coefficient draws at once, with a
vectorised bisection in place of Brent's method.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Final

import numpy as np
from scipy import optimize

from models._typing import FloatArray
from models.pricing.curve import DemandCurve

GRID_POINTS: Final = 25
SEARCH_SPAN: Final = 1e4
"""The unconstrained search runs from price/1e4 to price*1e4 around a reference price."""
SEARCH_POINTS: Final = 97
HINT_POINTS: Final = 97
BISECTIONS: Final = 64
_T_GRID: Final = np.linspace(0.0, 1.0, GRID_POINTS)
_T_SEARCH: Final = np.linspace(0.0, 1.0, SEARCH_POINTS)


@dataclass(frozen=True)
class Solution1D:
    """Best price on an interval, its objective value and the solver's iteration count."""

    price: float
    value: float
    nit: int


def _geometric(low: float, high: float, t: FloatArray) -> FloatArray:
    grid: FloatArray = low * (high / low) ** t
    grid[0], grid[-1] = low, high
    return grid


def hints(curve: DemandCurve, cost: float, reference: float) -> FloatArray:
    """Extra grid points where the optimum usually is: around the reference price, and,
    for linear demand, between the cost and the price at which demand reaches zero.

    A coarse geometric grid over a wide interval can step right over a narrow
    profitable window (linear demand with a cost close to its zero-demand price),
    leaving only flat zero-profit points to choose from.
    """
    points = [np.linspace(reference / 3.0, reference * 3.0, HINT_POINTS)]
    if curve.linear and not isinstance(curve.coef, np.ndarray):
        choke = float(curve.price_for_units(0.0))
        start = max(cost, 0.0)
        if math.isfinite(choke) and choke > start:
            points.append(np.linspace(start, choke, HINT_POINTS)[1:-1])
    return np.concatenate(points)


def maximise(
    curve: DemandCurve,
    cost: float,
    low: float,
    high: float,
    *,
    t: FloatArray = _T_GRID,
    extra: FloatArray | None = None,
) -> Solution1D:
    """Maximise ``(price - cost) * units`` on ``[low, high]`` (``0 < low <= high < inf``);
    ``extra`` adds candidate points (see :func:`hints`) to the coarse grid."""
    if not high > low:
        return Solution1D(low, curve.objective_at(low, cost), 0)
    grid = _geometric(low, high, t)
    if extra is not None:
        inside = extra[(extra > low) & (extra < high)]
        grid = np.union1d(grid, inside)
    values = curve.objective(grid, cost)
    i = int(np.argmax(values))
    best = Solution1D(float(grid[i]), float(values[i]), 0)
    last = grid.size - 1
    a, b = float(grid[max(i - 1, 0)]), float(grid[min(i + 1, last)])
    h_a, h_b = curve.marginal_at(a, cost), curve.marginal_at(b, cost)
    if (i == 0 and h_a <= 0.0) or (i == last and h_b >= 0.0):
        return best  # the objective falls (rises) through the end of the interval
    if h_a > 0.0 > h_b:
        root, info = optimize.brentq(
            curve.marginal_at, a, b, args=(cost,), xtol=1e-14 * b, full_output=True
        )
        candidate = Solution1D(float(root), curve.objective_at(root, cost), info.iterations)
    else:
        found = optimize.minimize_scalar(
            lambda p: -curve.objective_at(p, cost),
            bounds=(a, b),
            method="bounded",
            options={"xatol": 1e-12 * b},
        )
        candidate = Solution1D(float(found.x), -float(found.fun), int(found.nit))
    return candidate if candidate.value >= best.value else best


@dataclass(frozen=True)
class Unconstrained:
    """The maximiser over all positive prices, or the direction in which there is none."""

    price: float | None
    direction: str | None


def unconstrained(curve: DemandCurve, cost: float, reference: float) -> Unconstrained:
    """Maximise over ``[reference / 1e4, reference * 1e4]``; an optimum still pressing
    against either end (the objective improving past it) counts as unbounded."""
    low, high = reference / SEARCH_SPAN, reference * SEARCH_SPAN
    found = maximise(curve, cost, low, high, t=_T_SEARCH, extra=hints(curve, cost, reference))
    if found.price >= high * (1.0 - 1e-12) and curve.marginal_at(high, cost) > 0.0:
        return Unconstrained(None, "above")
    if found.price <= low * (1.0 + 1e-12) and curve.marginal_at(low, cost) < 0.0:
        return Unconstrained(None, "below")
    return Unconstrained(found.price, None)


def maximise_batch(
    curve: DemandCurve, cost: float, low: FloatArray, high: FloatArray
) -> FloatArray:
    """Best price per draw on ``[low[d], high[d]]``; ``curve`` holds one row per draw."""
    span = np.where(high > low, high / low, 1.0)
    grid = low[:, None] * span[:, None] ** _T_GRID[None, :]
    values = curve.objective(grid, cost)
    i = np.argmax(values, axis=1)
    rows = np.arange(grid.shape[0])
    last = grid.shape[1] - 1
    a = grid[rows, np.maximum(i - 1, 0)]
    b = grid[rows, np.minimum(i + 1, last)]
    best = grid[rows, i]
    sign_change = (_marginal_rows(curve, a, cost) > 0.0) & (_marginal_rows(curve, b, cost) < 0.0)
    for _ in range(BISECTIONS):
        mid = 0.5 * (a + b)
        rising = _marginal_rows(curve, mid, cost) > 0.0
        a = np.where(rising, mid, a)
        b = np.where(rising, b, mid)
    root = 0.5 * (a + b)
    better = sign_change & (
        _objective_rows(curve, root, cost) >= _objective_rows(curve, best, cost)
    )
    result: FloatArray = np.where(better, root, best)
    return result


def _marginal_rows(curve: DemandCurve, price: FloatArray, cost: float) -> FloatArray:
    result: FloatArray = curve.marginal(price[:, None], cost)[:, 0]
    return result


def _objective_rows(curve: DemandCurve, price: FloatArray, cost: float) -> FloatArray:
    result: FloatArray = curve.objective(price[:, None], cost)[:, 0]
    return result


def at_bound(price: float, bound: float) -> bool:
    """Whether ``price`` sits on ``bound`` (relative tolerance 1e-9)."""
    return math.isfinite(bound) and abs(price - bound) <= 1e-9 * max(abs(bound), 1e-300)
