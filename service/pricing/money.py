"""Money in a currency's own minor unit (cents, or none for yen), by Babel's currency data.

Prices that leave the service, in API answers and on the analyst pages, are rounded to the
minor unit of the product's currency: a search or a price step can leave float noise such
as 17.930000000000003 that no till can charge.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import replace
from functools import lru_cache

from babel.numbers import get_currency_precision

from models import PriceRecommendation

DEFAULT_DIGITS = 2


@lru_cache(maxsize=256)
def minor_digits(currency: str | None) -> int:
    """Decimal places of the currency's minor unit (EUR 2, JPY 0, KWD 3); 2 if unknown."""
    if not currency:
        return DEFAULT_DIGITS
    try:
        return int(get_currency_precision(currency.upper()))
    except (ValueError, TypeError):
        return DEFAULT_DIGITS


def round_price(value: float | None, currency: str | None) -> float | None:
    """A price rounded to the currency's minor unit; None and non-finite values unchanged."""
    if value is None or not math.isfinite(value):
        return value
    return round(float(value), minor_digits(currency))


def format_money(value: float, currency: str | None, *, with_code: bool = True) -> str:
    """``1,234.50 EUR``: grouped digits to the minor unit, then the currency's code."""
    text = f"{value:,.{minor_digits(currency)}f}".replace("-", "−")
    return f"{text} {currency.upper()}" if with_code and currency else text


def money_text(currency: str | None) -> Callable[[float], str]:
    """How the library's messages write money for this currency: ``17.93 EUR``.

    >>> money_text("JPY")(1799.6), money_text("EUR")(17.930000000000003)
    ('1,800 JPY', '17.93 EUR')
    """

    def write(value: float) -> str:
        return format_money(value, currency) if math.isfinite(value) else f"{value:g}"

    return write


def _step(currency: str | None) -> float:
    return 10.0 ** -minor_digits(currency)


def _inward(price: float, low: float | None, high: float | None, currency: str | None) -> float:
    """``price`` rounded to the minor unit, kept inside [low, high] where a step allows."""
    digits, step = minor_digits(currency), _step(currency)
    rounded = round(price, digits)
    if high is not None and rounded > high + 1e-9 * max(1.0, abs(high)):
        rounded = round(math.floor(high / step + 1e-9) * step, digits)
    if low is not None and rounded < low - 1e-9 * max(1.0, abs(low)):
        rounded = round(math.ceil(low / step - 1e-9) * step, digits)
    return rounded


def round_recommendation(rec: PriceRecommendation, currency: str | None) -> PriceRecommendation:
    """Prices of a recommendation in the currency's minor unit.

    The recommended price is rounded to the nearest minor unit inside the allowed range
    (never across a bound or the change cap); the change and margins follow the rounded
    prices. Units, revenue and profit stay those of the price the search found, which
    differs from the rounded one by less than half a minor unit.
    """
    low, high = rec.feasible_range
    current = rec.current
    if current is not None and math.isfinite(current.price):
        current = replace(current, price=round(current.price, minor_digits(currency)))
    price = rec.recommended.price
    if math.isfinite(price):
        price = _inward(price, low, high, currency)
    recommended = replace(rec.recommended, price=price, margin_pct=_margin(rec, price))
    change = rec.change_pct
    if current is not None and current.price and math.isfinite(price):
        change = 100.0 * (price / current.price - 1.0)
    uncertainty = rec.uncertainty
    if uncertainty is not None and uncertainty.price_interval is not None:
        a, b = uncertainty.price_interval
        interval = (
            round_price(a, currency) if math.isfinite(a) else a,
            round_price(b, currency) if math.isfinite(b) else b,
        )
        uncertainty = replace(uncertainty, price_interval=interval)  # type: ignore[arg-type]
    return replace(
        rec,
        current=current,
        recommended=recommended,
        change_pct=change,
        unconstrained_price=round_price(rec.unconstrained_price, currency),
        uncertainty=uncertainty,
    )


def _margin(rec: PriceRecommendation, price: float) -> float | None:
    if rec.unit_cost is None or not price or rec.recommended.margin_pct is None:
        return rec.recommended.margin_pct
    return 100.0 * (price - rec.unit_cost) / price
