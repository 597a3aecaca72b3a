"""The price interval one product's constraints leave open, demand limits included.

``max_units`` and ``min_units`` become price limits through the inverse demand curve:
with demand falling in price, a stock cap is a price floor and a volume target a price
ceiling (the other way round for a rising curve priced despite its wrong sign).
"""

from __future__ import annotations

import math

import numpy as np

from models._typing import FloatArray
from models.pricing.constraints import Bound, Interval, PriceConstraints, interval, price_limits
from models.pricing.curve import DemandCurve
from models.result import DemandFit


def units_limits(
    curve: DemandCurve, constraints: PriceConstraints
) -> list[tuple[str, FloatArray, FloatArray]]:
    """Price limits implied by ``max_units`` and ``min_units``: (name, lower, upper).

    Arrays follow the curve's shape (one value per draw for a batch). A lower limit of
    infinity means the constraint cannot be met at any price; a non-positive upper
    limit means no positive price meets it.
    """
    coef = np.asarray(curve.coef, dtype=np.float64)
    falling, rising, flat = coef < 0.0, coef > 0.0, coef == 0.0
    out = []
    for name, units, is_cap in (
        ("max_units", constraints.max_units, True),
        ("min_units", constraints.min_units, False),
    ):
        if units is None or (not is_cap and units <= 0.0):
            continue  # expected units are never negative
        price = curve.price_for_units(float(units))
        level = curve.units(1.0)  # the units of a flat curve
        if is_cap:
            lower = np.where(falling, price, 0.0)
            upper = np.where(rising, price, math.inf)
            never = flat & (level > units)
        else:
            lower = np.where(rising, price, 0.0)
            upper = np.where(falling, price, math.inf)
            never = flat & (level < units)
        lower = np.nan_to_num(lower, nan=0.0, posinf=math.inf, neginf=0.0)
        lower = np.where(never, math.inf, lower)
        upper = np.nan_to_num(upper, nan=math.inf, posinf=math.inf, neginf=-math.inf)
        out.append((name, lower, upper))
    return out


def feasible_interval(
    curve: DemandCurve,
    fit: DemandFit,
    constraints: PriceConstraints,
    *,
    unit_cost: float | None,
    current_price: float | None,
    prefix: str = "",
) -> Interval:
    """All price limits of one product intersected (raises naming the conflicts)."""
    lower, upper = price_limits(
        constraints, unit_cost=unit_cost, current_price=current_price, price_range=fit.price_range
    )
    for name, low, high in units_limits(curve, constraints):
        if float(low) > 0.0:
            lower.append(Bound(name, float(low)))
        if math.isfinite(float(high)):
            upper.append(Bound(name, float(high)))
    return interval(lower, upper, label=fit.sku, prefix=prefix)
