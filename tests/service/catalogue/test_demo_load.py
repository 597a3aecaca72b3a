"""`marginal demo` loads the invented catalogue into either database, idempotently."""

from __future__ import annotations

import pytest
import sqlalchemy as sa
from fastapi.testclient import TestClient

from service.catalogue import demo
from service.core.db import make_engine
from tests.plugins.storage import Database, row_count

pytestmark = pytest.mark.storage


def _stamps(db: Database) -> list[tuple[object, ...]]:
    engine = make_engine(db.settings)
    with engine.connect() as conn:
        rows = conn.execute(
            sa.text("SELECT sku, updated_at, history_changed_at FROM products ORDER BY sku")
        ).all()
    engine.dispose()
    return [tuple(r) for r in rows]


def test_a_changed_history_is_written_again(db: Database) -> None:
    from models.scenario import generate_catalogue

    demo.load(db.settings, seed=7)
    other = demo.load_catalogue(db.settings, generate_catalogue(8))
    assert other.updated > 0 and other.unchanged == 0


def test_demo_loads_once_and_reloads_in_place(
    db: Database, client: TestClient, headers: dict[str, str]
) -> None:
    first = demo.load(db.settings, seed=7)
    assert first.products == 40
    assert first.inserted == first.observations and first.updated == 0
    stored = row_count(db.settings, "observations")
    assert stored == first.observations
    stamps = _stamps(db)
    second = demo.load(db.settings, seed=7)
    # Loading again changes nothing: no row is rewritten and no history is marked as
    # changed (so a refit job finds nothing to do).
    assert (second.inserted, second.updated) == (0, 0)
    assert second.unchanged == first.observations
    assert _stamps(db) == stamps
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
