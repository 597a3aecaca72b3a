"""Prices leave the service in the currency's minor unit: the answers of the pricing
routes, the stored recommendations, and the rounding rule itself (never across a bound)."""

from __future__ import annotations

import dataclasses
import datetime as dt
import json
import math
from typing import Any

import pytest
from fastapi.testclient import TestClient

import models
from service.pricing.money import format_money, minor_digits, round_recommendation

pytestmark = pytest.mark.storage
WEEKS = [(dt.date(2025, 1, 6) + dt.timedelta(weeks=w)).isoformat() for w in range(40)]


def _linear_product(
    client: TestClient,
    headers: dict[str, str],
    sku: str,
    currency: str,
    current: float,
    unit_cost: float = 5.86,
) -> None:
    """Exact linear demand q = 3000 - 100 p (no noise), fitted linear; prices 12 to 24."""
    prices = [round(12 + 12 * ((7 * i) % 40) / 39, 4) for i in range(40)]
    prices[-1] = current
    client.put(
        f"/v1/products/{sku}",
        json={
            "name": sku,
            "unit_cost": unit_cost,
            "current_price": current,
            "currency": currency,
        },
        headers=headers,
    )
    rows = [
        {"period": w, "price": p, "units": 3000 - 100 * p}
        for w, p in zip(WEEKS, prices, strict=True)
    ]
    response = client.post(
        f"/v1/products/{sku}/observations", json={"observations": rows}, headers=headers
    )
    assert response.status_code == 200, response.json()
    fit = client.post(
        f"/v1/products/{sku}/fits", json={"spec": {"form": "linear"}}, headers=headers
    ).json()
    assert fit["status"] == "active", fit["gates"]


def _prices(answer: dict[str, Any]) -> list[float]:
    found = [answer["recommended"]["price"], answer["current"]["price"]]
    if answer.get("unconstrained_price") is not None:
        found.append(answer["unconstrained_price"])
    return found


def _decimals(value: float) -> int:
    """Decimals of a number as JSON writes it (``18.0`` has none, ``17.93`` two)."""
    text = json.dumps(value)
    return len(text.split(".")[1].rstrip("0")) if "." in text else 0


CAP = {"max_change_pct": 10}  # 10% above 16.30 is 16.3 * 1.1 = 17.930000000000003
FINE_STEP = {"price_step": 0.0001}  # a step finer than the cent


@pytest.mark.parametrize(
    ("currency", "constraints", "unit_cost", "expected"),
    [
        ("EUR", CAP, 9.86, 17.93),  # profit peak 19.93, held by the cap
        ("EUR", FINE_STEP, 5.8634, 17.93),  # profit peak 17.9317
        ("JPY", CAP, 9.86, 17.0),  # 18 would break the cap
        ("KWD", FINE_STEP, 5.8634, 17.932),  # three decimals
    ],
)
def test_answers_carry_prices_in_the_minor_unit_without_float_noise(
    client: TestClient,
    headers: dict[str, str],
    currency: str,
    constraints: dict[str, float],
    unit_cost: float,
    expected: float,
) -> None:
    sku = f"R-{currency}-{len(client.get('/v1/products', headers=headers).json()['items'])}"
    _linear_product(client, headers, sku, currency, current=16.3, unit_cost=unit_cost)
    response = client.post(
        f"/v1/products/{sku}/optimal-price",
        json={"objective": "profit", "constraints": constraints, "store": True},
        headers=headers,
    )
    assert response.status_code == 200, response.json()
    answer = response.json()
    digits = minor_digits(currency)
    for price in _prices(answer):
        assert _decimals(price) <= digits, (currency, price)
    assert answer["recommended"]["price"] == expected
    # The change follows the rounded prices.
    current, best = answer["current"]["price"], answer["recommended"]["price"]
    assert math.isclose(answer["change_pct"], 100 * (best / current - 1), rel_tol=1e-12)
    # The stored recommendation reads back the same.
    latest = client.get(
        "/v1/recommendations", params={"state": "proposed"}, headers=headers
    ).json()["items"]
    [stored] = [r for r in latest if r["sku"] == sku]
    assert _prices(stored) == _prices(answer)


def test_rounding_stays_inside_the_change_cap(client: TestClient, headers: dict[str, str]) -> None:
    # The profit peak 17.93 lies beyond the cap: 10% above 14.77 is 16.247, whose nearest
    # cent, 16.25, would break the cap; 16.24 keeps it.
    _linear_product(client, headers, "CAP-1", "EUR", current=14.77)
    response = client.post(
        "/v1/products/CAP-1/optimal-price",
        json={"objective": "profit", "constraints": {"max_change_pct": 10}},
        headers=headers,
    )
    answer = response.json()
    assert answer["binding_constraints"] == ["max_change_pct"], answer
    assert answer["recommended"]["price"] == 16.24


def test_round_recommendation_rounds_to_the_minor_unit_and_keeps_the_bounds() -> None:
    point = models.PricePoint(
        price=17.930000000000003, units=1.0, revenue=17.93, profit=2.0, margin_pct=50.0
    )
    rec = models.PriceRecommendation(
        sku="X",
        form="linear",
        objective="profit",
        unit_cost=8.965,
        current=dataclasses.replace(point, price=16.300000000000001),
        recommended=point,
        change_pct=10.000000000000018,
        unconstrained_price=17.934999,
        binding_constraints=(),
        feasible_range=(14.0, 17.9305),
        uncertainty=None,
        warnings=(),
        curve=None,
        scenario={},
        optimum="interior",
        search="allowed_prices",
        search_steps=3,
        summary="",
    )
    euros = round_recommendation(rec, "EUR")
    assert euros.recommended.price == 17.93 and euros.current is not None
    assert euros.current.price == 16.3 and euros.unconstrained_price == 17.93
    assert euros.change_pct == pytest.approx(100 * (17.93 / 16.3 - 1))
    assert euros.recommended.margin_pct == pytest.approx(50.0)
    # Yen have no minor unit; the bound 17.9305 keeps the price at 17, not 18.
    yen = round_recommendation(rec, "JPY")
    assert yen.recommended.price == 17.0
    assert minor_digits("eur") == 2 and minor_digits("JPY") == 0 and minor_digits("") == 2
    assert format_money(-1234.5, "EUR") == "−1,234.50 EUR"
    assert format_money(1234.6, "JPY", with_code=False) == "1,235"
