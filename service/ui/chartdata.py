"""The numbers each chart plots, computed with `models` from stored records.

Nothing here draws; :mod:`service.ui.charts` turns these records into SVG. Each
builder returns a record whose ``note`` says in words why something is missing
(no fit, a rejected fit, a refusal to price), so a chart can always be drawn.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np
from pydantic import ValidationError
from sqlalchemy.orm import Session

from models import (
    DemandFit,
    History,
    UnusableDataError,
    fitted_periods,
    fitted_units,
    predict,
)
from service.core.errors import InvalidInput, WrongSign
from service.core.tables import ProductRow
from service.estimation import histories
from service.pricing.recommendations import price_product
from service.pricing.schemas import ConstraintsIn, OptimalPriceRequest
from service.ui.records import ProductInfo, Recommendation, ShownFit

KINDS = ("demand", "money", "fit-over-time")
PROMO_COVARIATE = "promo"
"""A covariate of this name above zero marks a promotion week (the demo's convention)."""
CURVE_POINTS = 121
DEMAND_GRID_POINTS = 90
BAND_LEVEL = 0.95


@dataclass(frozen=True)
class Subject:
    """Everything a chart of one product may need."""

    product: ProductInfo
    fit: ShownFit | None
    recommendation: Recommendation | None
    history: History | None


def load_history(session: Session, product: ProductInfo, fit: ShownFit | None) -> History | None:
    """The stored history with the fit's cross prices aligned; None without observations."""
    row = session.get(ProductRow, product.id)
    if row is None:
        return None
    cross = fit.fit.spec.cross_prices if fit is not None else ()
    try:
        history = histories.load_history(session, product=row, cross_skus=cross)
    except InvalidInput:  # a sibling named by the spec is gone: plot without its prices
        history = histories.load_history(session, product=row)
    return history if history.n_periods else None


# -- demand chart --------------------------------------------------------------------------


@dataclass(frozen=True)
class PointGroup:
    """Past weeks of one kind, as (price, units) points."""

    kind: str  # regular, promotion, stockout, outside
    label: str
    price: np.ndarray
    units: np.ndarray


@dataclass(frozen=True)
class DemandBand:
    """Expected units over a price grid with a per-week prediction interval."""

    price: np.ndarray
    expected: np.ndarray
    low: np.ndarray
    high: np.ndarray
    level: float


@dataclass(frozen=True)
class DemandInputs:
    product: ProductInfo
    fit_label: str | None
    fit_active: bool
    groups: tuple[PointGroup, ...]
    band: DemandBand | None
    observed_range: tuple[float, float] | None
    current_price: float | None
    recommended_price: float | None
    scenario: dict[str, float]
    scenario_source: str
    note: str | None


def fit_label(shown: ShownFit) -> str:
    state = "active" if shown.active else "rejected"
    return f"fit version {shown.version} ({shown.fit.form}, {state})"


def _week_kinds(history: History, fit: DemandFit | None) -> np.ndarray:
    """Each week's kind; a stockout is marked as such even outside the fitted weeks."""
    kinds = np.full(history.n_periods, "regular", dtype=object)
    promo = history.covariates.get(PROMO_COVARIATE)
    if promo is not None:
        kinds[np.nan_to_num(promo) > 0] = "promotion"
    if fit is not None:
        first = np.datetime64(fit.window.first_period, "D")
        last = np.datetime64(fit.window.last_period, "D")
        kinds[(history.periods < first) | (history.periods > last)] = "outside"
    kinds[~history.in_stock] = "stockout"
    return kinds


_GROUP_LABELS = {
    "regular": "regular week",
    "promotion": "promotion week",
    "stockout": "out of stock (sales understate demand)",
    "outside": "outside the fitted weeks",
}


def _point_groups(history: History, fit: DemandFit | None) -> tuple[PointGroup, ...]:
    kinds = _week_kinds(history, fit)
    finite = np.isfinite(history.price) & np.isfinite(history.units)
    groups = []
    for kind, label in _GROUP_LABELS.items():
        mask = (kinds == kind) & finite
        if mask.any():
            groups.append(PointGroup(kind, label, history.price[mask], history.units[mask]))
    return tuple(groups)


def _scenario(
    fit: DemandFit, recommendation: Recommendation | None
) -> tuple[dict[str, float], str]:
    """Values of the other drivers: the recommendation's if it used this fit, else the latest."""
    latest = {k: v for k, v in fit.variable_latest.items() if k != "price" and math.isfinite(v)}
    if recommendation is not None:
        stored = recommendation.result.get("scenario") or {}
        given = {
            k: float(v)
            for k, v in stored.items()
            if k in latest and isinstance(v, (int, float)) and math.isfinite(v)
        }
        if given:
            return {**latest, **given}, "the latest recommendation's scenario"
    return latest, "the latest fitted week"


def _grid(fit: DemandFit, *prices: float | None) -> np.ndarray:
    low, high = fit.price_range
    marks = [p for p in (low, high, *prices) if p is not None and math.isfinite(p) and p > 0]
    return np.linspace(0.85 * min(marks), 1.15 * max(marks), DEMAND_GRID_POINTS)


def demand_band(
    fit: DemandFit, scenario: dict[str, float], prices: np.ndarray, *, level: float = BAND_LEVEL
) -> DemandBand | None:
    """Expected units and the prediction interval at each price, via `models.predict`."""
    expected, low, high = [], [], []
    try:
        for price in prices:
            point = predict(fit, price=float(price), covariates=scenario, level=level)
            expected.append(point.expected_units)
            low.append(point.interval_low)
            high.append(point.interval_high)
    except ValueError:  # a log term met a non-positive value
        return None
    band = DemandBand(
        price=prices,
        # Demand cannot fall below zero, as in the pricing curve of a linear fit.
        expected=np.maximum(np.array(expected), 0.0),
        low=np.maximum(np.array(low), 0.0),
        high=np.maximum(np.array(high), 0.0),
        level=level,
    )
    keep = np.isfinite(band.expected) & np.isfinite(band.low) & np.isfinite(band.high)
    if not keep.any():
        return None
    return DemandBand(
        price=band.price[keep],
        expected=band.expected[keep],
        low=band.low[keep],
        high=band.high[keep],
        level=level,
    )


def _recommended_price(recommendation: Recommendation | None) -> float | None:
    if recommendation is None:
        return None
    value = (recommendation.result.get("recommended") or {}).get("price")
    return float(value) if isinstance(value, (int, float)) and math.isfinite(value) else None


def demand_inputs(subject: Subject) -> DemandInputs:
    product, shown, history = subject.product, subject.fit, subject.history
    fit = shown.fit if shown is not None else None
    groups = _point_groups(history, fit) if history is not None else ()
    recommended = _recommended_price(subject.recommendation) if shown and shown.active else None
    current = product.current_price
    if current is None and fit is not None:
        current = fit.variable_latest.get("price")
    if fit is None or shown is None:
        missing = (
            "No demand model has been fitted for this product yet."
            if history is not None
            else "This product has no sales history yet."
        )
        return DemandInputs(
            product=product,
            fit_label=None,
            fit_active=False,
            groups=groups,
            band=None,
            observed_range=None,
            current_price=current,
            recommended_price=None,
            scenario={},
            scenario_source="",
            note=missing,
        )
    scenario, source = _scenario(fit, subject.recommendation if shown.active else None)

    band = demand_band(fit, scenario, _grid(fit, current, recommended))
    note: str | None = None
    if not shown.active:
        note = "This fit was rejected by the quality gates; it is shown for diagnosis only."
    if band is None:
        note = (note + " " if note else "") + "The curve cannot be evaluated at these values."
    return DemandInputs(
        product=product,
        fit_label=fit_label(shown),
        fit_active=shown.active,
        groups=groups,
        band=band,
        observed_range=fit.price_range,
        current_price=current,
        recommended_price=recommended,
        # Other products' prices are named as such in the summary.
        scenario={
            (f"price of {k}" if k in fit.spec.cross_prices else k): v for k, v in scenario.items()
        },
        scenario_source=source,
        note=note,
    )


# -- money chart ---------------------------------------------------------------------------


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
            force=False,
        ),
        source=source,
    )


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
    try:
        result = price_product(fit, product, rules.request)
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
    stored = _recommended_price(recommendation)
    note = None
    if recommendation is not None and not same_fit:
        note = (
            f"The latest recommendation (price {stored:.2f}) was made with another fit; "
            "the curves show the active fit under the same rules."
            if stored is not None
            else "The latest recommendation was made with another fit."
        )
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
    )


# -- fit over time -------------------------------------------------------------------------


@dataclass(frozen=True)
class FitTimeInputs:
    product: ProductInfo
    fit_label: str | None
    periods: np.ndarray  # datetime64[D]
    actual: np.ndarray
    stockout: np.ndarray  # bool
    promotion: np.ndarray  # bool
    fitted: np.ndarray | None  # nan where the model cannot be evaluated
    in_fit: np.ndarray  # bool: the week entered the estimation
    holdout_start: np.datetime64 | None
    holdout_weeks: int
    r_squared: float | None
    holdout_wape: float | None
    note: str | None


def fit_time_inputs(subject: Subject) -> FitTimeInputs:
    product, shown, history = subject.product, subject.fit, subject.history
    unfitted: dict[str, Any] = {
        "fit_label": None,
        "fitted": None,
        "holdout_start": None,
        "holdout_weeks": 0,
        "r_squared": None,
        "holdout_wape": None,
    }
    if history is None:
        none = np.array([], dtype=bool)
        return FitTimeInputs(
            product=product,
            periods=np.array([], dtype="datetime64[D]"),
            actual=np.array([]),
            stockout=none,
            promotion=none,
            in_fit=none,
            note="This product has no sales history yet.",
            **unfitted,
        )
    promo = history.covariates.get(PROMO_COVARIATE)
    promotion = np.nan_to_num(promo) > 0 if promo is not None else np.zeros(history.n_periods, bool)
    base: dict[str, Any] = {
        "product": product,
        "periods": history.periods,
        "actual": history.units,
        "stockout": ~history.in_stock,
        "promotion": promotion,
    }
    no_weeks = np.zeros(history.n_periods, dtype=bool)
    if shown is None:
        return FitTimeInputs(
            **base,
            in_fit=no_weeks,
            note="No demand model has been fitted for this product yet.",
            **unfitted,
        )
    fit = shown.fit
    note = None if shown.active else "Rejected fit, shown for diagnosis only."
    try:
        fitted = fitted_units(fit, history)
        in_fit, start = fitted_periods(fit, history)
    except (UnusableDataError, ValueError):
        fitted, in_fit, start = None, no_weeks, None
        note = (note + " " if note else "") + "The fit cannot be evaluated on the stored history."
    return FitTimeInputs(
        **base,
        fit_label=fit_label(shown),
        fitted=fitted,
        in_fit=in_fit,
        holdout_start=start,
        holdout_weeks=fit.window.holdout_periods if start is not None else 0,
        r_squared=fit.quality.r_squared,
        holdout_wape=fit.quality.holdout_wape,
        note=note,
    )
