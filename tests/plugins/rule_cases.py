"""Helpers of the jurisdiction-rule tests: a product with an exactly known demand curve,
prices, rules and price-record entries.

The product follows a constant-elasticity demand exactly (units = 5000 p^-3, no noise),
so the log-log fit recovers elasticity -3 and the profit-maximising price has the closed
form p* = c e / (1 + e) = 1.5 c (the markup rule of a monopolist facing constant
elasticity e; e.g. Varian, Intermediate Microeconomics, ch. 24, "markup pricing"; from
memory). With a unit cost of 4 that is 6.00, inside the observed prices 4 to 9.
"""

from __future__ import annotations

import datetime as dt

import sqlalchemy as sa
from fastapi.testclient import TestClient

from service.core.db import make_engine, make_session_factory, session_scope
from service.core.settings import Settings
from service.core.tables import ProductRow
from service.pricing import price_record

WEEKS = [(dt.date(2025, 1, 6) + dt.timedelta(weeks=w)).isoformat() for w in range(40)]
PRICES = [round(4.0 + 5.0 * ((7 * i) % 40) / 39, 4) for i in range(40)]
COST = 4.0
CURRENT = 5.0
OPTIMUM = 6.0  # closed form 1.5 * unit cost (module doc)


def exact_product(client: TestClient, headers: dict[str, str], sku: str, family: str = "") -> None:
    """A product whose history follows 5000 p^-3 exactly, with an active log-log fit."""
    fields: dict[str, object] = {"name": sku, "unit_cost": COST, "current_price": CURRENT}
    if family:
        fields["family"] = family
    put = client.put(f"/v1/products/{sku}", json=fields, headers=headers)
    assert put.status_code in (200, 201), put.json()
    rows = [
        {"period": w, "price": p, "units": 5000.0 * p**-3}
        for w, p in zip(WEEKS, PRICES, strict=True)
    ]
    added = client.post(
        f"/v1/products/{sku}/observations", json={"observations": rows}, headers=headers
    )
    assert added.status_code == 200, added.json()
    fit = client.post(
        f"/v1/products/{sku}/fits", json={"spec": {"form": "log-log"}}, headers=headers
    )
    assert fit.json()["status"] == "active", fit.json()


def price(client: TestClient, headers: dict[str, str], sku: str, **body: object) -> dict:
    answer = client.post(f"/v1/products/{sku}/optimal-price", json=body, headers=headers)
    assert answer.status_code == 200, answer.json()
    return dict(answer.json())


def add_rule(client: TestClient, headers: dict[str, str], **body: object) -> dict:
    made = client.post("/v1/jurisdiction-rules", json=body, headers=headers)
    assert made.status_code == 201, made.json()
    return dict(made.json())


def record_prices(settings: Settings, sku: str, *prices: tuple[float, float]) -> None:
    """Live prices in the price record: (price, days ago it started), oldest first."""
    engine = make_engine(settings)
    now = dt.datetime.now(dt.UTC)
    with session_scope(make_session_factory(engine, writer=True)) as session:
        product_id = session.scalar(sa.select(ProductRow.id).where(ProductRow.sku == sku))
        assert product_id is not None
        for value, days_ago in prices:
            price_record.add_entry(
                session,
                product_id=product_id,
                price=value,
                effective_from=now - dt.timedelta(days=days_ago),
                set_by_key_id=None,
            )
    engine.dispose()
