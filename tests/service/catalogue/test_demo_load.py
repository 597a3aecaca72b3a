"""`marginal demo` loads the invented catalogue into either database, idempotently."""

from __future__ import annotations

import pytest
from fastapi.testclient import TestClient

from service.catalogue import demo
from tests.plugins.storage import Database, row_count

pytestmark = pytest.mark.storage


def test_demo_loads_once_and_reloads_in_place(
    db: Database, client: TestClient, headers: dict[str, str]
) -> None:
    first = demo.load(db.settings, seed=7)
    assert first.products == 40
    assert first.inserted == first.observations and first.updated == 0
    stored = row_count(db.settings, "observations")
    assert stored == first.observations
    second = demo.load(db.settings, seed=7)
    assert (second.inserted, second.updated) == (0, first.observations)
    assert row_count(db.settings, "observations") == stored
    assert row_count(db.settings, "products") == 40

    families = {p["family"] for p in client.get("/v1/products", headers=headers).json()["items"]}
    assert len(families) == 5
    history = client.get("/v1/products/TEA-001/observations", headers=headers).json()["items"]
    assert len(history) == 104
    assert {"rival_price", "promo", "ad_spend", "holiday"} <= set(history[0]["covariates"])


def test_demo_history_round_trips_exactly(
    db: Database, client: TestClient, headers: dict[str, str]
) -> None:
    from models.scenario import generate_catalogue

    catalogue = generate_catalogue(7)
    demo.load_catalogue(db.settings, catalogue)
    product = catalogue.products[3]
    stored = client.get(f"/v1/products/{product.sku}/observations", headers=headers).json()["items"]
    assert [s["units"] for s in stored] == product.history.units.tolist()
    assert [s["price"] for s in stored] == product.history.price.tolist()
    assert [s["in_stock"] for s in stored] == product.history.in_stock.tolist()
