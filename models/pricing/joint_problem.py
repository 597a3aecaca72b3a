"""The continuous joint pricing problem of a family and its SLSQP solution.

Prices are scaled by each product's reference price and the objective by its value at
the first start, so SLSQP works on numbers near 1. Constraints are stacked into one
vector that is non-negative when feasible: ladder rules, units limits and the two sides
of the price-index cap, each with its analytic Jacobian.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any, Final

import numpy as np
from scipy import optimize

from models._typing import FloatArray
from models.errors import InfeasibleConstraintsError, PricingInputError
from models.pricing.constraints import Interval, PriceConstraints
from models.pricing.curve import DemandCurve, scenario_values
from models.pricing.joint import FamilyDemand
from models.pricing.solve1d import at_bound, maximise
from models.result import DemandFit

FEASIBLE: Final = 1e-7
"""Largest scaled constraint violation accepted from the solver."""


@dataclass(frozen=True)
class JointProduct:
    """One member of the family with its inputs and price-only limits."""

    sku: str
    fit: DemandFit
    unit_cost: float | None
    current: float | None
    constraints: PriceConstraints
    box: Interval
    reference: float


@dataclass
class JointProblem:
    """Bounds and constraints of the joint problem, in price space."""

    products: tuple[JointProduct, ...]
    costs: FloatArray
    low: FloatArray
    high: FloatArray
    order: tuple[tuple[int, int], ...]
    weights: FloatArray | None = None
    index_base: float = 1.0
    index_cap: float | None = None
    caps: list[tuple[int, float, bool]] = field(default_factory=list)

    @property
    def skus(self) -> list[str]:
        return [p.sku for p in self.products]

    @property
    def scale(self) -> FloatArray:
        return np.array([p.reference for p in self.products])

    @property
    def size(self) -> int:
        return len(self.order) + len(self.caps) + (2 if self.index_cap is not None else 0)

    def names(self) -> list[str]:
        """Constraint names in the order of :meth:`values`."""
        skus = self.skus
        out = [f"order:{skus[a]}<={skus[b]}" for a, b in self.order]
        out += [f"{skus[i]}.{'max_units' if cap else 'min_units'}" for i, _, cap in self.caps]
        if self.index_cap is not None:
            out += ["max_total_change_pct", "max_total_change_pct"]
        return out

    def values(self, demand: FamilyDemand, prices: FloatArray) -> FloatArray:
        """Scaled constraint values, all >= 0 when feasible; ``prices`` is ``(..., n)``."""
        parts: list[FloatArray] = []
        scale = self.scale
        for a, b in self.order:
            parts.append((prices[..., b] - prices[..., a]) / (0.5 * (scale[a] + scale[b])))
        if self.caps:
            units = demand.units(prices)
            for i, limit, is_cap in self.caps:
                gap = limit - units[..., i] if is_cap else units[..., i] - limit
                parts.append(gap / max(limit, 1.0))
        if self.index_cap is not None and self.weights is not None:
            move = prices @ self.weights / self.index_base - 1.0
            parts += [self.index_cap - move, self.index_cap + move]
        if not parts:
            return np.zeros((*prices.shape[:-1], 0))
        return np.stack(parts, axis=-1)

    def jacobian(self, demand: FamilyDemand, prices: FloatArray) -> FloatArray:
        """``d values / d prices`` at one price vector, shape ``(size, n)``."""
        n = prices.shape[-1]
        rows: list[FloatArray] = []
        scale = self.scale
        for a, b in self.order:
            row = np.zeros(n)
            row[b], row[a] = 1.0, -1.0
            rows.append(row / (0.5 * (scale[a] + scale[b])))
        if self.caps:
            _, jac = demand.jacobian(prices)
            for i, limit, is_cap in self.caps:
                rows.append((-jac[i] if is_cap else jac[i]) / max(limit, 1.0))
        if self.index_cap is not None and self.weights is not None:
            slope = self.weights / self.index_base
            rows += [-slope, slope]
        return np.array(rows).reshape(len(rows), n)

    def violation(self, demand: FamilyDemand, prices: FloatArray) -> float:
        values = self.values(demand, prices)
        return float(max(0.0, -values.min())) if values.size else 0.0


def split_scenario(
    fits: Sequence[DemandFit], scenario: Mapping[str, Any] | None
) -> list[dict[str, float]]:
    """Scenario values per product from shared entries and ``{sku: {...}}`` entries."""
    skus = {f.sku for f in fits}
    shared: dict[str, float] = {}
    own: dict[str, dict[str, float]] = {f.sku: {} for f in fits}
    for key, value in (scenario or {}).items():
        if isinstance(value, Mapping):
            if key not in skus:
                raise PricingInputError(
                    f"scenario entry {key!r} holds values but is not a product of the family"
                )
            own[key].update({str(k): float(v) for k, v in value.items()})
        elif key in skus:
            raise PricingInputError(
                f"{key} is priced by this optimisation; remove it from the scenario"
            )
        else:
            shared[str(key)] = float(value)
    known: set[str] = set().union(*(set(f.variable_latest) - {"price"} for f in fits))
    unknown = sorted(set(shared) - known)
    if unknown:
        raise PricingInputError(f"unknown scenario variables {unknown}; known: {sorted(known)}")
    out = []
    for fit in fits:
        overrides = own[fit.sku]
        inside = sorted(set(overrides) & skus)
        if inside:
            raise PricingInputError(
                f"{fit.sku}: {inside} are priced by this optimisation; "
                "remove them from the scenario"
            )
        mine = {k: v for k, v in shared.items() if k in fit.variable_latest}
        out.append(scenario_values(fit, {**mine, **overrides}))
    return out


def propagate_order(problem: JointProblem) -> tuple[FloatArray, FloatArray]:
    """Tighten the box along the ladder rules; raise when the rules cannot hold."""
    low, high = problem.low.copy(), problem.high.copy()
    for _ in range(len(problem.products) + 1):
        changed = False
        for a, b in problem.order:
            if low[a] > low[b]:
                low[b], changed = low[a], True
            if high[b] < high[a]:
                high[a], changed = high[b], True
        if not changed:
            break
    if np.all(low <= high * (1.0 + 1e-12)):
        return low, high
    skus = problem.skus
    rules = [f"order:{skus[a]}<={skus[b]}" for a, b in problem.order]
    limits = [
        f"{p.sku}.{s}"
        for p in problem.products
        for s in p.box.sources("low") + p.box.sources("high")
    ]
    ranges = "; ".join(
        f"{p.sku} {lo:.6g} to {hi:.6g}"
        for p, lo, hi in zip(problem.products, problem.low, problem.high, strict=True)
    )
    raise InfeasibleConstraintsError(
        rules + limits,
        f"the price ladder ({', '.join(rules)}) cannot hold within the products' price "
        f"limits ({ranges})",
    )


def own_curve(demand: FamilyDemand, prices: FloatArray, i: int) -> DemandCurve:
    """Product ``i``'s curve against its own price with the siblings at ``prices``."""
    point = prices.copy()
    point[i] = 1.0  # ln(1) = 0; the level term is taken out below
    log_price = bool(demand.coef_level[i, i] == 0.0)
    offset = float(demand.eta(point)[i]) - (0.0 if log_price else float(demand.coef_level[i, i]))
    coef = float(demand.coef_log[i, i] if log_price else demand.coef_level[i, i])
    return DemandCurve(demand.skus[i], "", offset, coef, log_price, bool(demand.linear[i]))


@dataclass(frozen=True)
class Solved:
    """A solver outcome: prices, objective value, constraint violation, iterations."""

    prices: FloatArray
    value: float
    violation: float
    nit: int
    message: str

    def beats(self, other: Solved) -> bool:
        """Feasible first, then the larger objective (then the smaller violation)."""
        ok, other_ok = self.violation <= FEASIBLE, other.violation <= FEASIBLE
        if ok != other_ok:
            return ok
        if not ok:
            return self.violation < other.violation
        return self.value > other.value + 1e-12 * abs(other.value)


def solve_slsqp(
    problem: JointProblem,
    demand: FamilyDemand,
    low: FloatArray,
    high: FloatArray,
    starts: Sequence[FloatArray],
) -> Solved:
    """Best SLSQP solution over the starting points."""
    scale = problem.scale
    costs = problem.costs
    first = np.clip(starts[0], low, high)
    value_scale = max(abs(float(demand.objective(first, costs))), 1e-12)

    def fun(x: FloatArray) -> tuple[float, FloatArray]:
        p = np.clip(x * scale, low, high)
        value, gradient = demand.objective_and_gradient(p, costs)
        return -value / value_scale, -gradient * scale / value_scale

    def cons(x: FloatArray) -> FloatArray:
        return problem.values(demand, np.clip(x * scale, low, high))

    def cons_jac(x: FloatArray) -> FloatArray:
        return problem.jacobian(demand, np.clip(x * scale, low, high)) * scale

    constraints = [{"type": "ineq", "fun": cons, "jac": cons_jac}] if problem.size else []
    bounds = optimize.Bounds(low / scale, high / scale)
    best: Solved | None = None
    for start in starts:
        found = optimize.minimize(
            fun,
            np.clip(start, low, high) / scale,
            jac=True,
            method="SLSQP",
            bounds=bounds,
            constraints=constraints,
            options={"maxiter": 500, "ftol": 1e-13},
        )
        prices = np.clip(found.x * scale, low, high)
        candidate = Solved(
            prices,
            float(demand.objective(prices, costs)),
            problem.violation(demand, prices),
            int(found.nit),
            str(found.message),
        )
        if best is None or candidate.beats(best):
            best = candidate
    assert best is not None
    return best


def starting_points(
    problem: JointProblem, demand: FamilyDemand, low: FloatArray, high: FloatArray
) -> list[FloatArray]:
    """Current prices, each product's own optimum with the siblings there, mid-box."""
    current = np.clip(problem.scale, low, high)
    own = current.copy()
    for i in range(demand.n):
        curve = own_curve(demand, current, i)
        own[i] = maximise(curve, float(problem.costs[i]), float(low[i]), float(high[i])).price
    return [current, own, np.sqrt(low * high)]


def raise_infeasible(problem: JointProblem, demand: FamilyDemand, solved: Solved) -> None:
    """Name the constraints the least-violating solution still breaks, and its bounds."""
    values = problem.values(demand, solved.prices)
    broken = [n for n, v in zip(problem.names(), values, strict=True) if v < -FEASIBLE]
    held = []
    for p, price in zip(problem.products, solved.prices, strict=True):
        for side in ("low", "high"):
            if at_bound(float(price), float(getattr(p.box, side))):
                held += [f"{p.sku}.{s}" for s in p.box.sources(side)]
    raise InfeasibleConstraintsError(
        broken + held,
        "no prices satisfy every family constraint together; the closest prices found still "
        f"break {', '.join(dict.fromkeys(broken))}"
        + (f" while held at {', '.join(held)}" if held else ""),
    )
