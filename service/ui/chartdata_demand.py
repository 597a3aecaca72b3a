"""The numbers of the demand chart: past periods as points, the fitted curve and its band."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from models import DemandFit, History, predict
from service.ui.chartdata import (
    PROMO_COVARIATE,
    Subject,
    fit_label,
    near_seen_prices,
    period_of,
    recommended_price,
)
from service.ui.records import ProductInfo, Recommendation

DEMAND_GRID_POINTS = 90
BAND_LEVEL = 0.95


@dataclass(frozen=True)
class PointGroup:
    """Past periods of one kind, as (price, units) points."""

    kind: str  # regular, promotion, stockout, outside
    label: str
    price: np.ndarray
    units: np.ndarray


@dataclass(frozen=True)
class DemandBand:
    """Expected units over a price grid with a per-period prediction interval."""

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
    period: str  # the word for one period of the history: day, week, month...


def _period_kinds(history: History, fit: DemandFit | None) -> np.ndarray:
    """Each period's kind; a stockout is marked as such even outside the fitted periods."""
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
    "regular": "regular {period}",
    "promotion": "promotion {period}",
    "stockout": "out of stock (sales understate demand)",
    "outside": "outside the fitted {period}s",
}


def _point_groups(history: History, fit: DemandFit | None) -> tuple[PointGroup, ...]:
    kinds = _period_kinds(history, fit)
    period = period_of(history)
    finite = np.isfinite(history.price) & np.isfinite(history.units)
    groups = []
    for kind, label in _GROUP_LABELS.items():
        mask = (kinds == kind) & finite
        if mask.any():
            shown = label.format(period=period)
            groups.append(PointGroup(kind, shown, history.price[mask], history.units[mask]))
    return tuple(groups)


def _scenario(
    fit: DemandFit, recommendation: Recommendation | None, period: str
) -> tuple[dict[str, float], str]:
    """Values of the other drivers: the recommendation's if it used this fit, else the latest."""
    latest = {k: v for k, v in fit.default_values.items() if k != "price" and math.isfinite(v)}
    if recommendation is not None:
        stored = recommendation.result.get("scenario") or {}
        given = {
            k: float(v)
            for k, v in stored.items()
            if k in latest and isinstance(v, (int, float)) and math.isfinite(v)
        }
        if given:
            return {**latest, **given}, "the latest recommendation's scenario"
    events = " (events off)" if fit.variable_events else ""
    return latest, f"the latest fitted {period}{events}"


def _grid(fit: DemandFit, *prices: float | None) -> np.ndarray:
    low, high = fit.price_range
    marks = [p for p in (low, high, *prices) if p is not None and math.isfinite(p) and p > 0]
    # 1.15 times the largest double is no number: the grid ends at the largest one.
    top = min(1.15 * max(marks), float(np.finfo(np.float64).max))
    return np.linspace(0.85 * min(marks), top, DEMAND_GRID_POINTS)


def _off_chart_note(fit: DemandFit, **prices: float | None) -> str | None:
    off = [
        f"The {name} price {price:.6g} lies far outside the prices the fit saw; it is not drawn."
        for name, price in prices.items()
        if price is not None and not near_seen_prices(fit, price)
    ]
    return " ".join(off) or None


def demand_band(
    fit: DemandFit, scenario: dict[str, float], prices: np.ndarray, *, level: float = BAND_LEVEL
) -> DemandBand | None:
    """Expected units and the prediction interval at each price, via `models.predict`."""
    expected, low, high = [], [], []
    try:
        # Far from the prices seen, units may pass the largest double: such points are
        # left out below, not errors.
        with np.errstate(over="ignore", under="ignore", invalid="ignore", divide="ignore"):
            for price in prices:
                point = predict(fit, price=float(price), covariates=scenario, level=level)
                expected.append(point.expected_units)
                low.append(point.interval_low)
                high.append(point.interval_high)
    except ValueError:  # a log term met a non-positive value
        return None
    except OverflowError:  # a square beyond double precision
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


def demand_inputs(subject: Subject) -> DemandInputs:
    product, shown, history = subject.product, subject.fit, subject.history
    fit = shown.fit if shown is not None else None
    groups = _point_groups(history, fit) if history is not None else ()
    recommended = recommended_price(subject.recommendation) if shown and shown.active else None
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
            period=period_of(history),
        )
    scenario, source = _scenario(
        fit, subject.recommendation if shown.active else None, period_of(history)
    )
    off_chart = _off_chart_note(fit, current=current, recommended=recommended)
    current = current if near_seen_prices(fit, current) else None
    recommended = recommended if near_seen_prices(fit, recommended) else None

    band = demand_band(fit, scenario, _grid(fit, current, recommended))
    notes: list[str] = []
    if not shown.active:
        notes.append("This fit was rejected by the quality gates; it is shown for diagnosis only.")
    if band is None:
        notes.append("The curve cannot be evaluated at these values.")
    if off_chart:
        notes.append(off_chart)
    note = " ".join(notes) or None
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
        period=period_of(history),
    )
