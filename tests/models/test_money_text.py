"""The library writes money in its warnings with the function its caller passes.

Closed forms: a constant-elasticity fit q = 1000 p^-1.5 seen at prices 8-16 has its profit
optimum at p = c e / (1 + e) = 3c (the Lerner markup rule, e.g. Varian, Intermediate
Microeconomics, ch. 25 "Monopoly"; from memory), so unit cost 7 puts it at 21; the
observed-range guard (prices seen widened by 10%, the library's own rule) ends at 17.6.
"""

from __future__ import annotations

import numpy as np
import pytest

from models import PriceConstraints, optimal_family_prices, optimal_price
from models.guards import EXTRAPOLATION
from models.money import plain_money
from tests.plugins.pricing_cases import COSTS, exact_fit, two_linear

PRICES = np.linspace(8.0, 16.0, 40)


def euros(value: float) -> str:
    return f"€{value:,.2f}"


def _message(result, code: str) -> str:  # type: ignore[no-untyped-def]
    return " ".join(w.message for w in result.warnings if w.code == code)


def test_single_product_warnings_use_the_given_money_text() -> None:
    fit = exact_fit("TEA-100", "log-log", PRICES, 1000.0 * PRICES**-1.5)
    lifted = optimal_price(
        fit,
        unit_cost=7.0,
        constraints=PriceConstraints(allow_extrapolation=True),
        money=euros,
    )
    assert lifted.recommended.price == pytest.approx(21.0, rel=1e-9)
    outside = _message(lifted, EXTRAPOLATION)
    assert outside.startswith("price €21.00 is 31% above the highest"), outside
    assert "(€8.00 to €16.00)" in outside

    losing = optimal_price(fit, unit_cost=20.0, money=euros)
    cost = _message(losing, "cost_above_feasible_prices")
    assert cost.startswith("Unit cost €20.00 is above every allowed price (at most €17.60)")

    # Without one, six significant digits and no currency.
    plain = _message(optimal_price(fit, unit_cost=20.0), "cost_above_feasible_prices")
    assert plain.startswith("Unit cost 20 is above every allowed price (at most 17.6)")


def test_family_warnings_use_the_given_money_text() -> None:
    fits = two_linear()
    costly = {sku: 1000.0 for sku in fits}  # above every allowed price of either product
    result = optimal_family_prices(fits, unit_costs=costly, money=euros)
    for product in result.products:
        cost = _message(product, "cost_above_feasible_prices")
        assert cost.startswith("Unit cost €1,000.00 is above every allowed price (at most €")
    plain = optimal_family_prices(fits, unit_costs=COSTS)
    assert all("€" not in w.message for p in plain.products for w in p.warnings)


def test_plain_money_keeps_six_significant_digits() -> None:
    assert plain_money(17.930000000000003) == "17.93"
    assert plain_money(0.1 + 0.2) == "0.3"
