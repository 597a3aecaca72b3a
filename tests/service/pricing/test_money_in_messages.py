"""Warnings in price answers write money as money: rounded to the minor unit of the
product's currency, with its code (EUR in cents, JPY in whole yen), never a raw float.

The numbers are closed forms on exact linear demand q = 2000 - 100 p seen at prices 8 to
16: the profit optimum is (2000 / 100 + c) / 2, so unit cost 18 puts it at 19; the
observed-range guard (prices seen widened by 10%, the service's own rule) stops at 17.6.
Minor units: ISO 4217 gives EUR two decimals and JPY none.
"""

from __future__ import annotations

import datetime as dt

from fastapi.testclient import TestClient

WEEKS = [(dt.date(2025, 1, 6) + dt.timedelta(weeks=w)).isoformat() for w in range(40)]
PRICES = [round(8.0 + 8.0 * ((7 * i) % 40) / 39, 4) for i in range(40)]


def _linear_product(
    client: TestClient, headers: dict[str, str], sku: str, currency: str, scale: float
) -> None:
    """q = 2000 - 100 p / scale at prices 8-16 times ``scale``, unit cost 18 x scale."""
    prices = [p * scale for p in PRICES]
    product = {
        "name": sku,
        "unit_cost": 18.0 * scale,
        "current_price": prices[-1],
        "currency": currency,
    }
    assert client.put(f"/v1/products/{sku}", json=product, headers=headers).status_code in (
        200,
        201,
    )
    rows = [
        {"period": w, "price": p, "units": 2000.0 - 100.0 * p / scale}
        for w, p in zip(WEEKS, prices, strict=True)
    ]
    sent = client.post(
        f"/v1/products/{sku}/observations", json={"observations": rows}, headers=headers
    )
    assert sent.status_code == 200, sent.text
    fit = client.post(
        f"/v1/products/{sku}/fits", json={"spec": {"form": "linear"}}, headers=headers
    ).json()
    assert fit["status"] == "active", fit["gates"]


def _messages(answer: dict, code: str) -> str:
    return " ".join(w["message"] for w in answer["warnings"] if w["code"] == code)


def test_warnings_write_prices_in_the_currency_minor_unit(
    client: TestClient, headers: dict[str, str]
) -> None:
    _linear_product(client, headers, "MONEY-EUR", "EUR", 1.0)
    free = client.post(
        "/v1/products/MONEY-EUR/optimal-price",
        json={"constraints": {"allow_extrapolation": True}},
        headers=headers,
    ).json()
    outside = _messages(free, "price_outside_observed_range")
    # 19 is 18.75% above 16 (printed to whole percent: 19%).
    assert "price 19.00 EUR is 19% above the highest" in outside, outside
    assert "(8.00 EUR to 16.00 EUR)" in outside, outside

    # A unit cost above every allowed price (at most 16 x 1.1 = 17.6).
    losing = client.post(
        "/v1/products/MONEY-EUR/optimal-price", json={"unit_cost": 40.0}, headers=headers
    ).json()
    cost = _messages(losing, "cost_above_feasible_prices")
    assert "Unit cost 40.00 EUR is above every allowed price (at most 17.60 EUR)" in cost, cost

    # Yen have no minor unit: 1,760 rather than 1760.0000000000002, grouped.
    _linear_product(client, headers, "MONEY-JPY", "JPY", 100.0)
    yen = client.post(
        "/v1/products/MONEY-JPY/optimal-price", json={"unit_cost": 4000.0}, headers=headers
    ).json()
    cost = _messages(yen, "cost_above_feasible_prices")
    assert "Unit cost 4,000 JPY is above every allowed price (at most 1,760 JPY)" in cost, cost


def test_answers_about_a_price_beyond_those_seen_write_it_as_money(
    client: TestClient, headers: dict[str, str]
) -> None:
    # 18.40 lies 15% above the highest price seen (16), where 160 units still sell.
    _linear_product(client, headers, "MONEY-PRED", "EUR", 1.0)
    predicted = client.post(
        "/v1/products/MONEY-PRED/predict", json={"price": 18.4}, headers=headers
    )
    assert predicted.status_code == 200, predicted.text
    said = _messages(predicted.json(), "price_outside_observed_range")
    assert said.startswith("price 18.40 EUR is 15% above the highest price observed"), said
    assert "(8.00 EUR to 16.00 EUR)" in said
    at = client.get(
        "/v1/products/MONEY-PRED/elasticities", params={"at": "price:18.4"}, headers=headers
    )
    assert at.status_code == 200, at.text
    assert _messages(at.json(), "price_outside_observed_range") == said
