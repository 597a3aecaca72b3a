"""Guards on using a fit away from the data it was fitted on."""

from __future__ import annotations

from models.money import MoneyText, plain_money
from models.result import DemandFit, FitWarning

EXTRAPOLATION: str = "price_outside_observed_range"


def price_range_warning(
    fit: DemandFit, price: float, money: MoneyText = plain_money
) -> FitWarning | None:
    """A warning when ``price`` lies outside the prices the fit has seen (amounts written
    by ``money``).

    A regression says little about prices a product was never sold at, so every
    figure computed there is an extrapolation and should say so.

    Examples
    --------
    >>> from models import generate_catalogue, fit_demand, ModelSpec
    >>> product = generate_catalogue(7).product("TEA-004")
    >>> fit = fit_demand(product.history, ModelSpec(form="log-log"))
    >>> price_range_warning(fit, fit.price_range[1] * 2).code
    'price_outside_observed_range'
    >>> price_range_warning(fit, sum(fit.price_range) / 2) is None
    True
    """
    low, high = fit.price_range
    if low <= price <= high:
        return None
    side = "above the highest" if price > high else "below the lowest"
    gap = (price / high - 1.0) if price > high else (1.0 - price / low)
    return FitWarning(
        EXTRAPOLATION,
        f"price {money(price)} is {gap:.0%} {side} price observed in the fitted periods "
        f"({money(low)} to {money(high)}); the figures there are extrapolations",
    )
