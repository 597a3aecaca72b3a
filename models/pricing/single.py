"""Recommended price of one product: :func:`optimal_price`."""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np

from models._typing import FloatArray
from models.errors import (
    InfeasibleConstraintsError,
    MissingUnitCostError,
    PricingInputError,
    UnboundedObjectiveError,
)
from models.guards import price_range_warning
from models.money import MoneyText, plain_money
from models.pricing import notes
from models.pricing.constraints import Interval, PriceConstraints, grid_prices
from models.pricing.curve import DemandCurve, scenario_values
from models.pricing.decide import NO_HARM_CHECK, check_decision, choose
from models.pricing.inputs import (
    check_curve_points,
    check_draws,
    check_objective,
    check_signs,
    check_value,
)
from models.pricing.limits import feasible_interval
from models.pricing.result import CurvePoint, PricePoint, PriceRecommendation
from models.pricing.single_draws import draw_uncertainty
from models.pricing.solve1d import (
    SEARCH_SPAN,
    Unconstrained,
    at_bound,
    hints,
    maximise,
    unconstrained,
)
from models.result import DemandFit, FitWarning

# Kinds of optimum, ranked: a family's optimum is the most constrained of its products'.
STATUS_INTERIOR = 0
STATUS_CONSTRAINED = 1
STATUS_UNBOUNDED = 2
OPTIMUM_WORDS = {
    STATUS_INTERIOR: "interior",
    STATUS_CONSTRAINED: "held_by_constraint",
    STATUS_UNBOUNDED: "no_finite_optimum",
}
SEARCH_WORDS = {
    "continuous": "continuous",
    "grid": "allowed_prices",
    "grid-local": "allowed_prices_local",
}


def price_point(curve: DemandCurve, price: float, unit_cost: float | None) -> PricePoint:
    """Units, revenue, profit and margin at one price."""
    units = curve.units_at(price)
    profit = margin = None
    if unit_cost is not None:
        profit = (price - unit_cost) * units
        margin = 100.0 * (price - unit_cost) / price
    return PricePoint(price, units, price * units, profit, margin)


@dataclass(frozen=True)
class _Search:
    """The interval the solver searches: the feasible one, closed with search limits."""

    low: float
    high: float
    open_low: bool
    open_high: bool


def _search(iv: Interval, reference: float) -> _Search:
    open_low = not iv.low > 0.0
    open_high = math.isinf(iv.high)
    return _Search(
        low=reference / SEARCH_SPAN if open_low else iv.low,
        high=reference * SEARCH_SPAN if open_high else iv.high,
        open_low=open_low,
        open_high=open_high,
    )


def _check_bounded(
    curve: DemandCurve, cost: float, price: float, search: _Search, objective: str
) -> None:
    """Raise when the optimum runs into a search limit that no constraint set."""
    at_top = search.open_high and price >= search.high * (1.0 - 1e-12)
    if at_top and curve.marginal_at(search.high, cost) > 0.0:
        raise UnboundedObjectiveError(
            curve.sku,
            "above",
            f"{curve.sku}: the {objective} grows without limit as the price rises "
            "(demand too inelastic to stop it) and no constraint caps the price: set max_price or "
            "max_change_pct, or keep the observed-range guard (allow_extrapolation=false)",
        )
    at_bottom = search.open_low and price <= search.low * (1.0 + 1e-12)
    if at_bottom and curve.marginal_at(search.low, cost) < 0.0:
        raise UnboundedObjectiveError(
            curve.sku,
            "below",
            f"{curve.sku}: the {objective} grows without limit as the price falls and no "
            "constraint sets a floor: set min_price, min_margin_pct or max_change_pct, "
            "or keep the observed-range guard (allow_extrapolation=false)",
        )


def _pick_grid(
    curve: DemandCurve, cost: float, prices: FloatArray, near: float
) -> tuple[float, int]:
    """Best allowed price (ties go to the one nearest ``near``) and the count evaluated."""
    values = curve.objective(prices, cost)
    top = float(values.max())
    ties = np.flatnonzero(values >= top - 1e-12 * max(abs(top), 1e-300))
    best = ties[np.argmin(np.abs(prices[ties] - near))]
    return float(prices[best]), int(prices.size)


def _binding_sides(
    curve: DemandCurve, cost: float, price: float, iv: Interval
) -> tuple[list[str], list[str]]:
    """Constraints at the low and high end that hold ``price`` (the continuous optimum)."""
    scale = abs(curve.objective_at(price, cost)) + 1e-300
    low: list[str] = []
    high: list[str] = []
    if at_bound(price, iv.low) and curve.marginal_at(iv.low, cost) * iv.low < -1e-9 * scale:
        low = iv.sources("low")
    if at_bound(price, iv.high) and curve.marginal_at(iv.high, cost) * iv.high > 1e-9 * scale:
        high = iv.sources("high")
    return low, high


def _unbounded_warning(
    curve: DemandCurve,
    free: Unconstrained,
    objective: str,
    price: float,
    low: list[str],
    high: list[str],
) -> FitWarning | None:
    """The warning for an optimum that is only a bound, if that is the case."""
    if free.direction == "above" and high:
        return notes.unbounded("above", objective, float(curve.elasticity(price)), high)
    if free.direction == "below" and low:
        return notes.unbounded("below", objective, float(curve.elasticity(price)), low)
    return None


def _message(status: int, binding: list[str], grid: str | None, n_grid: int) -> str:
    if binding == [NO_HARM_CHECK]:
        text = (
            "The current price is kept: moving did not win clearly enough over the "
            "estimate's distribution (do-no-harm check)."
        )
    elif status == STATUS_UNBOUNDED:
        text = f"No finite optimum; the price sits on {', '.join(binding)}."
    elif status == STATUS_CONSTRAINED:
        text = f"Optimum held by a constraint: {', '.join(binding)}."
    else:
        text = "Optimum found inside the allowed prices."
    if grid is not None:
        text += f" Best of {n_grid} allowed prices ({grid})."
    return text


def _curve(
    curve: DemandCurve,
    fit: DemandFit,
    iv: Interval,
    unit_cost: float | None,
    prices_of_interest: list[float],
    n: int,
) -> tuple[CurvePoint, ...]:
    low, high = fit.price_range
    ends = [iv.low, iv.high, 0.9 * low, 1.1 * high, *prices_of_interest]
    finite = [p for p in ends if math.isfinite(p) and p > 0.0]
    prices = np.linspace(min(finite), max(finite), n)
    units = curve.units(prices)
    inside = (prices >= iv.low * (1.0 - 1e-12)) & (prices <= iv.high * (1.0 + 1e-12))
    return tuple(
        CurvePoint(
            price=float(p),
            units=float(q),
            revenue=float(p * q),
            profit=None if unit_cost is None else float((p - unit_cost) * q),
            feasible=bool(ok),
        )
        for p, q, ok in zip(prices, units, inside, strict=True)
    )


def _attainable(
    curve: DemandCurve,
    fit: DemandFit,
    constraints: PriceConstraints,
    unit_cost: float | None,
    current_price: float | None,
    iv: Interval,
    allowed: FloatArray | None,
) -> tuple[Interval, FloatArray | None]:
    """The prices allowed without the decision's own limits, and their grid if any: where
    the value of knowing looks for each outcome's best."""
    allowed_rules = constraints.without_decision_limits()
    if allowed_rules is constraints:
        return iv, allowed
    wide = feasible_interval(
        curve, fit, allowed_rules, unit_cost=unit_cost, current_price=current_price
    )
    grid = None if allowed is None else grid_prices(constraints, wide.low, wide.high)
    return wide, grid


def optimal_price(
    fit: DemandFit,
    *,
    objective: str = "profit",
    unit_cost: float | None = None,
    current_price: float | None = None,
    constraints: PriceConstraints | None = None,
    scenario: Mapping[str, float] | None = None,
    uncertainty_draws: int = 0,
    seed: int = 0,
    curve_points: int = 0,
    allow_wrong_sign: bool = False,
    money: MoneyText = plain_money,
    decide_by: str = "point",
    no_harm_check: bool = False,
    decision_figures: bool = True,
) -> PriceRecommendation:
    """The price that maximises expected profit or revenue under business constraints.

    Parameters
    ----------
    fit : DemandFit
        The product's active fit (also one restored with :meth:`DemandFit.from_dict`).
    objective : {"profit", "revenue"}
        ``profit`` is ``(price - unit_cost) * expected units``.
    unit_cost : float, optional
        Needed for ``profit`` and ``min_margin_pct``; with ``revenue`` it only adds the
        profit figures.
    current_price : float, optional
        For ``change_pct``, the current figures, ``max_change_pct`` and the chance of
        beating the current price.
    constraints : PriceConstraints, optional
        Business rules; by default only the observed-range guard applies.
    scenario : mapping, optional
        Covariate values and cross prices (by sibling sku); unnamed ones take the
        fit's latest values, as do seasonal and trend terms.
    uncertainty_draws : int
        Coefficient draws from N(params, cov) (seeded by ``seed``); each is re-optimised
        under the same constraints. 0 skips the uncertainty figures.
    seed : int
    curve_points : int
        0, or 50-200 plotting points of price, units, revenue and profit.
    allow_wrong_sign : bool
        Optimise even when the own-price effect has the wrong sign (is not negative).
    money : callable
        Writes an amount of money in the warnings (default: :func:`~models.money.plain_money`).
    decide_by : {"point", "expected", "cautious"}
        How the price is chosen from the estimate: ``point`` takes the fitted coefficients
        as exact; ``expected`` maximises the mean profit (or revenue) over the estimate's
        normal distribution; ``cautious`` maximises its 10th percentile. See
        :mod:`models.pricing.decide`; every choice reports the value of knowing.
    no_harm_check : bool
        Keep the current price unless the chosen one wins on average and in at least 80%
        of the estimate's distribution (needs a current price the constraints allow).
    decision_figures : bool
        False leaves the answer's ``decision_figures`` out (None) and skips their quadrature,
        for callers that need only the price (the check still works them out when on).

    Returns
    -------
    PriceRecommendation

    Raises
    ------
    WrongSignError
        The own-price coefficient has the wrong sign (unless ``allow_wrong_sign``).
    MissingUnitCostError
        ``objective="profit"`` or ``min_margin_pct`` without ``unit_cost``.
    InfeasibleConstraintsError
        No price meets every constraint; ``.constraints`` names the conflicting ones.
    UnboundedObjectiveError
        The objective improves without limit and nothing caps the price.
    PricingInputError
        Other invalid input (unknown scenario variable, ``max_change_pct`` without a
        current price, ...).

    Examples
    --------
    >>> import numpy as np
    >>> from models import History, ModelSpec, fit_demand
    >>> price = np.linspace(8.0, 16.0, 30)
    >>> periods = np.arange("2024-01-01", 30 * 7, 7, dtype="datetime64[D]")
    >>> units = 1000.0 * price ** -4.0  # constant elasticity -4
    >>> h = History("TEA-9", periods, price, units, np.full(30, np.nan), np.ones(30, bool))
    >>> fit = fit_demand(h, ModelSpec(form="log-log"))
    >>> round(optimal_price(fit, unit_cost=9.0).recommended.price, 6)  # 9 * 4 / 3
    12.0
    """
    check_objective(objective)
    unit_cost = check_value("unit_cost", unit_cost, positive=False)
    current_price = check_value("current_price", current_price, positive=True)
    check_draws(uncertainty_draws)
    check_curve_points(curve_points)
    check_decision(decide_by)
    constraints = constraints or PriceConstraints()
    if objective == "profit" and unit_cost is None:
        raise MissingUnitCostError([fit.sku], "objective=profit")
    if constraints.min_margin_pct is not None and unit_cost is None:
        raise MissingUnitCostError([fit.sku], "min_margin_pct")
    if constraints.max_change_pct is not None and current_price is None:
        raise PricingInputError(f"{fit.sku}: max_change_pct needs the current price")
    wrong_signed = check_signs([fit], allow_wrong_sign=allow_wrong_sign)
    values = scenario_values(fit, scenario)
    curve = DemandCurve.from_fit(fit, values)
    cost = unit_cost if objective == "profit" and unit_cost is not None else 0.0
    iv = feasible_interval(
        curve, fit, constraints, unit_cost=unit_cost, current_price=current_price
    )
    reference = current_price or math.sqrt(fit.price_range[0] * fit.price_range[1])
    search = _search(iv, reference)
    best = maximise(curve, cost, search.low, search.high, extra=hints(curve, cost, reference))
    _check_bounded(curve, cost, best.price, search, objective)
    free = unconstrained(curve, cost, reference)

    grid_name = constraints.grid_name
    price, nit, method = best.price, best.nit, "continuous"
    allowed: FloatArray | None = None
    if grid_name is not None:
        allowed = grid_prices(constraints, iv.low, iv.high)
        assert allowed is not None
        if allowed.size == 0:
            ends = list(dict.fromkeys(iv.sources("low") + iv.sources("high")))
            raise InfeasibleConstraintsError(
                [grid_name, *ends],
                f"{fit.sku}: no allowed price ({grid_name}) lies between {iv.low:.6g} and "
                f"{iv.high:.6g}, the range left by {', '.join(ends) or 'the other limits'}",
            )
        price, nit = _pick_grid(curve, cost, allowed, best.price)
        method = "grid"
    point_price = price
    price, decided, decision_notes = choose(
        fit,
        values,
        iv,
        attainable=_attainable(curve, fit, constraints, unit_cost, current_price, iv, allowed),
        decide_by=decide_by,
        no_harm_check=no_harm_check,
        with_figures=decision_figures,
        cost=cost,
        current_price=current_price,
        reference=reference,
        allowed=allowed,
        point_price=point_price,
    )

    low, high = _binding_sides(curve, cost, best.price, iv)
    if price != point_price:  # the rule moved the price: a bound binds only if it is on it
        low = iv.sources("low") if at_bound(price, iv.low) else []
        high = iv.sources("high") if at_bound(price, iv.high) else []
    binding = low + high
    if decided is not None and decided.held_current:
        binding = [NO_HARM_CHECK]
    if grid_name is not None and not at_bound(point_price, best.price) and price == point_price:
        binding.append(grid_name)
    warnings: list[FitWarning] = list(decision_notes)
    if wrong_signed:
        warnings.append(notes.wrong_sign_allowed(float(curve.coef)))
    bound_note = _unbounded_warning(curve, free, objective, price, low, high)
    if bound_note is not None:
        warnings.append(bound_note)
    if unit_cost is not None and math.isfinite(iv.high) and unit_cost >= iv.high:
        warnings.append(notes.cost_above(unit_cost, iv.high, objective, money))
    outside = price_range_warning(fit, price, money)
    if outside is not None:
        warnings.append(outside)
    recommended = price_point(curve, price, unit_cost)
    if recommended.units <= 0.0:
        warnings.append(notes.no_demand(price, money))

    uncertainty = None
    if uncertainty_draws:
        uncertainty, extra = draw_uncertainty(
            fit,
            values,
            constraints.without_decision_limits(),  # each draw's best among allowed prices
            objective=objective,
            unit_cost=unit_cost,
            current_price=current_price,
            recommended=price,
            reference=reference,
            n=int(uncertainty_draws),
            seed=seed,
        )
        warnings += extra

    status = (
        STATUS_UNBOUNDED
        if bound_note is not None
        else STATUS_CONSTRAINED
        if binding
        else STATUS_INTERIOR
    )
    current = None if current_price is None else price_point(curve, current_price, unit_cost)
    interest = [price] + ([] if current_price is None else [current_price])
    return PriceRecommendation(
        sku=fit.sku,
        form=fit.form,
        objective=objective,
        unit_cost=unit_cost,
        current=current,
        recommended=recommended,
        change_pct=None if current_price is None else 100.0 * (price / current_price - 1.0),
        unconstrained_price=free.price,
        binding_constraints=tuple(binding),
        feasible_range=(iv.low, iv.high if math.isfinite(iv.high) else None),
        uncertainty=uncertainty,
        warnings=tuple(warnings),
        curve=(_curve(curve, fit, iv, unit_cost, interest, curve_points) if curve_points else None),
        scenario=values,
        optimum=OPTIMUM_WORDS[status],
        search=SEARCH_WORDS[method],
        search_steps=nit,
        summary=_message(status, binding, grid_name, nit),
        decision_figures=decided,
    )
