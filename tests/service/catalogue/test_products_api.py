"""Products over HTTP: create, replace, read, change, delete, list and paginate."""

from __future__ import annotations

import pytest
from fastapi.testclient import TestClient

from tests.plugins.storage import Database, row_count

pytestmark = pytest.mark.storage

TIN = {
    "name": "Jasmine Pearl tin 100 g",
    "family": "green",
    "currency": "EUR",
    "unit_cost": 2.8,
    "current_price": 6.49,
    "min_price": 4.0,
    "max_price": 9.0,
}


def test_put_creates_then_replaces(client: TestClient, headers: dict[str, str]) -> None:
    created = client.put("/v1/products/TEA-001", json=TIN, headers=headers)
    assert created.status_code == 201
    assert created.json()["sku"] == "TEA-001"
    assert created.json()["current_price"] == 6.49
    replaced = client.put("/v1/products/TEA-001", json={"name": "Renamed"}, headers=headers)
    assert replaced.status_code == 200
    body = replaced.json()
    assert body["name"] == "Renamed"
    assert body["family"] is None and body["current_price"] is None  # PUT replaces whole
    assert body["currency"] == "EUR"


def test_get_patch_delete(client: TestClient, headers: dict[str, str], db: Database) -> None:
    client.put("/v1/products/TEA-002", json=TIN, headers=headers)
    got = client.get("/v1/products/TEA-002", headers=headers)
    assert got.status_code == 200 and got.json()["family"] == "green"
    patched = client.patch(
        "/v1/products/TEA-002", json={"current_price": 6.99, "family": None}, headers=headers
    )
    assert patched.status_code == 200
    assert patched.json()["current_price"] == 6.99
    assert patched.json()["family"] is None
    assert patched.json()["name"] == TIN["name"]
    assert client.delete("/v1/products/TEA-002", headers=headers).status_code == 204
    assert row_count(db.settings, "products") == 0
    missing = client.get("/v1/products/TEA-002", headers=headers)
    assert missing.status_code == 404
    assert missing.headers["content-type"] == "application/problem+json"


@pytest.mark.parametrize(
    ("body", "field"),
    [
        ({}, "name"),
        ({"name": "x", "current_price": -1}, "current_price"),
        ({"name": "x", "current_price": "6.49"}, "current_price"),
        ({"name": "x", "currency": "euro"}, "currency"),
        ({"name": "x", "colour": "red"}, "colour"),
        ({"name": "x", "min_price": 9, "max_price": 4}, "body"),
    ],
)
def test_put_rejects_bad_bodies(
    client: TestClient, headers: dict[str, str], db: Database, body: dict[str, object], field: str
) -> None:
    response = client.put("/v1/products/TEA-003", json=body, headers=headers)
    assert response.status_code == 422
    problem = response.json()
    assert response.headers["content-type"] == "application/problem+json"
    assert problem["status"] == 422 and problem["type"].endswith("/invalid-input")
    assert field in [e["field"] for e in problem["errors"]]
    assert row_count(db.settings, "products") == 0


def test_patch_refuses_crossed_bounds_and_clearing_name(
    client: TestClient, headers: dict[str, str]
) -> None:
    client.put("/v1/products/TEA-004", json=TIN, headers=headers)
    crossed = client.patch("/v1/products/TEA-004", json={"min_price": 10.0}, headers=headers)
    assert crossed.status_code == 422
    assert crossed.json()["errors"][0]["field"] == "min_price"
    cleared = client.patch("/v1/products/TEA-004", json={"name": None}, headers=headers)
    assert cleared.status_code == 422
    assert client.get("/v1/products/TEA-004", headers=headers).json()["min_price"] == 4.0


def test_bad_sku_in_path_is_422(client: TestClient, headers: dict[str, str]) -> None:
    response = client.put("/v1/products/bad%20sku", json=TIN, headers=headers)
    assert response.status_code == 422


def test_list_filters_by_family_and_paginates(client: TestClient, headers: dict[str, str]) -> None:
    for i in range(7):
        family = "green" if i % 2 == 0 else "black"
        client.put(f"/v1/products/TEA-{i:03d}", json={**TIN, "family": family}, headers=headers)
    seen: list[str] = []
    cursor = None
    pages = 0
    while True:
        params: dict[str, str | int] = {"family": "green", "limit": 2}
        if cursor:
            params["cursor"] = cursor
        page = client.get("/v1/products", params=params, headers=headers).json()
        seen += [p["sku"] for p in page["items"]]
        pages += 1
        cursor = page["next_cursor"]
        if cursor is None:
            break
    assert seen == ["TEA-000", "TEA-002", "TEA-004", "TEA-006"]
    assert pages == 2
    everything = client.get("/v1/products", headers=headers).json()
    assert len(everything["items"]) == 7 and everything["next_cursor"] is None


def test_malformed_cursor_is_422(client: TestClient, headers: dict[str, str]) -> None:
    response = client.get("/v1/products", params={"cursor": "%%%"}, headers=headers)
    assert response.status_code == 422
    assert response.json()["errors"][0]["field"] == "cursor"


def test_times_carry_utc(client: TestClient, headers: dict[str, str]) -> None:
    body = client.put("/v1/products/TEA-005", json=TIN, headers=headers).json()
    again = client.get("/v1/products/TEA-005", headers=headers).json()
    for stamp in (body["created_at"], again["created_at"], again["updated_at"]):
        assert stamp.endswith(("Z", "+00:00")), stamp
