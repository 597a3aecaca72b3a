"""The numbers of the money chart: revenue and profit against price under the stored rules."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
from pydantic import ValidationError

from models import DemandFit
from service.core.errors import InvalidInput, WrongSign
from service.pricing.recommendations import price_product
from service.pricing.schemas import ConstraintsIn, OptimalPriceRequest
from service.ui.chartdata import (
    Subject,
    fit_label,
    near_seen_prices,
    period_of,
    recommended_price,
)
from service.ui.records import ProductInfo, Recommendation

CURVE_POINTS = 121


@dataclass(frozen=True)
class MoneyInputs:
    product: ProductInfo
    fit_label: str | None
    objective: str
    price: np.ndarray
    revenue: np.ndarray
    profit: np.ndarray | None
    feasible: tuple[float, float | None] | None
    best_price: float | None
    best_value: float | None
    current_price: float | None
    current_value: float | None
    unconstrained_price: float | None
    binding: tuple[str, ...]
    price_interval: tuple[float, float] | None
    draws: int
    prob_better: float | None
    stored_price: float | None
    rules_source: str
    warnings: tuple[str, ...]
    note: str | None
    period: str = "period"  # the word for one period of the history: day, week, month...

    @property
    def drawn(self) -> bool:
        return self.price.size > 0


def _empty_money(product: ProductInfo, label: str | None, note: str) -> MoneyInputs:
    empty = np.array([], dtype=np.float64)
    return MoneyInputs(
        product=product,
        fit_label=label,
        objective="profit",
        price=empty,
        revenue=empty,
        profit=None,
        feasible=None,
        best_price=None,
        best_value=None,
        current_price=None,
        current_value=None,
        unconstrained_price=None,
        binding=(),
        price_interval=None,
        draws=0,
        prob_better=None,
        stored_price=None,
        rules_source="",
        warnings=(),
        note=note,
    )


@dataclass(frozen=True)
class PricingRules:
    """What to optimise and under which rules, taken from the latest recommendation."""

    request: OptimalPriceRequest
    source: str


def _stored_rules(
    product: ProductInfo, fit: DemandFit, recommendation: Recommendation | None
) -> PricingRules:
    request: dict[str, Any] = recommendation.request if recommendation is not None else {}
    raw_rules = request.get("constraints") or {}
    if recommendation is not None and recommendation.from_family:
        raw_rules = (request.get("product_constraints") or {}).get(product.sku, raw_rules)
    try:
        rules = ConstraintsIn.model_validate(raw_rules)
    except ValidationError:
        rules = ConstraintsIn()
    objective = str(request.get("objective") or ("profit" if product.unit_cost else "revenue"))
    scenario = {}
    if recommendation is not None:
        stored = recommendation.result.get("scenario") or {}
        scenario = {
            k: float(v)
            for k, v in stored.items()
            if k in fit.variable_latest and k != "price" and isinstance(v, (int, float))
        }
    unit_cost = request.get("unit_cost")
    given_price = request.get("current_price")
    if recommendation is None:
        source = "no stored recommendation: the product's own price bounds, nothing else"
    elif recommendation.from_family:
        source = (
            f"recommendation {recommendation.id} (priced with its family; "
            "this chart varies this product's price alone)"
        )
    else:
        source = f"recommendation {recommendation.id}"
    return PricingRules(
        request=OptimalPriceRequest.model_construct(
            objective="revenue" if objective == "revenue" else "profit",
            constraints=rules,
            scenario=scenario,
            unit_cost=float(unit_cost) if unit_cost is not None else None,
            current_price=float(given_price) if given_price is not None else None,
            uncertainty_draws=int(request.get("uncertainty_draws") or 0),
            seed=int(request.get("seed") or 0),
            curve_points=CURVE_POINTS,
            allow_wrong_sign=False,
        ),
        source=source,
    )


def _near_current_price(
    product: ProductInfo, fit: DemandFit, request: OptimalPriceRequest
) -> tuple[OptimalPriceRequest, str | None]:
    """The request with the latest week's price standing in for a current price far outside
    the prices the fit saw (such as 1e308), and the note that says so."""
    given = request.current_price if request.current_price is not None else product.current_price
    latest = fit.variable_latest.get("price")
    if given is None or near_seen_prices(fit, given) or latest is None:
        return request, None
    note = (
        f"The current price {given:.6g} lies far outside the prices the fit saw; "
        f"the latest week's price {latest:.6g} stands in for it."
    )
    return request.model_copy(update={"current_price": latest}), note


def money_inputs(subject: Subject) -> MoneyInputs:
    """Revenue and profit against price, recomputed with the latest recommendation's rules."""
    product, shown, recommendation = subject.product, subject.fit, subject.recommendation
    if shown is None:
        return _empty_money(product, None, "No demand model yet, so no price can be weighed.")
    label = fit_label(shown)
    if not shown.active:
        return _empty_money(
            product,
            label,
            "The latest fit was rejected by the quality gates and no fit is active, "
            "so no price is recommended.",
        )
    fit = shown.fit
    same_fit = recommendation is not None and recommendation.fit_id == shown.id
    rules = _stored_rules(product, fit, recommendation)
    request, stand_in = _near_current_price(product, fit, rules.request)
    try:
        result = price_product(fit, product, request, move_spread=subject.move_spread)
    except WrongSign as exc:
        return _empty_money(product, label, f"No price is recommended: {exc.reason}")
    except InvalidInput as exc:
        return _empty_money(product, label, f"No price can be recommended: {exc.detail}")
    objective, unit_cost = rules.request.objective, rules.request.unit_cost
    if unit_cost is None:
        unit_cost = product.unit_cost
    curve = result.curve or ()
    price = np.array([p.price for p in curve])
    revenue = np.array([p.revenue for p in curve])
    profit = (
        np.array([p.profit for p in curve], dtype=np.float64)
        if unit_cost is not None and all(p.profit is not None for p in curve)
        else None
    )
    value = result.recommended.profit if objective == "profit" else result.recommended.revenue
    current_value = None
    if result.current is not None:
        current_value = result.current.profit if objective == "profit" else result.current.revenue
    uncertainty = result.uncertainty
    stored = recommended_price(recommendation)
    notes = [stand_in] if stand_in else []
    if recommendation is not None and not same_fit:
        notes.append(
            f"The latest recommendation (price {stored:.2f}) was made with another fit; "
            "the curves show the active fit under the same rules."
            if stored is not None
            else "The latest recommendation was made with another fit."
        )
    note = " ".join(notes) or None
    return MoneyInputs(
        product=product,
        fit_label=label,
        objective=objective,
        price=price,
        revenue=revenue,
        profit=profit,
        feasible=result.feasible_range,
        best_price=result.recommended.price,
        best_value=value,
        current_price=result.current.price if result.current is not None else None,
        current_value=current_value,
        unconstrained_price=result.unconstrained_price,
        binding=result.binding_constraints,
        price_interval=uncertainty.price_interval if uncertainty is not None else None,
        draws=uncertainty.draws if uncertainty is not None else 0,
        prob_better=uncertainty.prob_better_than_current if uncertainty is not None else None,
        stored_price=stored if not same_fit else None,
        rules_source=rules.source,
        warnings=tuple(w.message for w in result.warnings),
        note=note,
        period=period_of(subject.history),
    )
