"""JSON batch upserts and history reads, including every refusal writing nothing."""

from __future__ import annotations

from typing import Any

import pytest
from fastapi.testclient import TestClient

from tests.plugins.storage import Database, row_count

pytestmark = pytest.mark.storage


def _obs(period: str, price: float = 5.0, units: float = 10.0, **extra: Any) -> dict[str, Any]:
    return {"period": period, "price": price, "units": units, **extra}


@pytest.fixture
def product(client: TestClient, headers: dict[str, str]) -> str:
    client.put("/v1/products/TEA-010", json={"name": "Sencha tin"}, headers=headers)
    return "/v1/products/TEA-010/observations"


def test_upsert_counts_and_is_idempotent(
    client: TestClient, headers: dict[str, str], product: str, db: Database
) -> None:
    batch = {
        "observations": [
            _obs(
                "2024-01-01",
                unit_cost=2.5,
                in_stock=True,
                covariates={"promo": 1, "rival_price": 1.02},
            ),
            _obs("2024-01-08", price=5.5, units=8),
        ]
    }
    first = client.post(product, json=batch, headers=headers)
    assert first.status_code == 200
    assert first.json() == {"rows": 2, "inserted": 2, "updated": 0}
    again = client.post(product, json=batch, headers=headers)
    assert again.json() == {"rows": 2, "inserted": 0, "updated": 2}
    assert row_count(db.settings, "observations") == 2
    changed = client.post(
        product,
        json={"observations": [_obs("2024-01-08", units=9), _obs("2024-01-15")]},
        headers=headers,
    )
    assert changed.json() == {"rows": 2, "inserted": 1, "updated": 1}
    history = client.get(product, headers=headers).json()["items"]
    assert [h["period"] for h in history] == ["2024-01-01", "2024-01-08", "2024-01-15"]
    assert history[0]["covariates"] == {"promo": 1.0, "rival_price": 1.02}
    assert history[0]["in_stock"] is True and history[0]["unit_cost"] == 2.5
    assert history[1]["units"] == 9 and history[1]["price"] == 5.0


def test_history_range_and_pages(client: TestClient, headers: dict[str, str], product: str) -> None:
    periods = [f"2024-01-{d:02d}" for d in (1, 8, 15, 22, 29)]
    client.post(product, json={"observations": [_obs(p) for p in periods]}, headers=headers)
    ranged = client.get(
        product, params={"start": "2024-01-08", "end": "2024-01-22"}, headers=headers
    ).json()
    assert [h["period"] for h in ranged["items"]] == periods[1:4]
    first = client.get(product, params={"limit": 2}, headers=headers).json()
    second = client.get(
        product, params={"limit": 2, "cursor": first["next_cursor"]}, headers=headers
    ).json()
    assert [h["period"] for h in first["items"] + second["items"]] == periods[:4]


GOOD = _obs("2024-03-04")
# Each bad batch starts with a good row: a refusal must not write that one either.
BAD_BATCHES: list[tuple[str, list[dict[str, Any]], str]] = [
    ("missing units", [GOOD, {"period": "2024-01-01", "price": 5}], "observations[1].units"),
    ("price as text", [GOOD, _obs("2024-01-01", price="5")], "observations[1].price"),
    ("price as boolean", [GOOD, _obs("2024-01-01", price=True)], "observations[1].price"),
    ("negative price", [GOOD, _obs("2024-01-01", price=-5)], "observations[1].price"),
    ("zero price", [GOOD, _obs("2024-01-01", price=0)], "observations[1].price"),
    ("negative units", [GOOD, _obs("2024-01-01", units=-1)], "observations[1].units"),
    ("bad date", [GOOD, _obs("2024-02-30")], "observations[1].period"),
    ("extra field", [GOOD, _obs("2024-01-01", colour="red")], "observations[1].colour"),
    (
        "text covariate",
        [GOOD, _obs("2024-01-01", covariates={"promo": "yes"})],
        "observations[1].covariates.promo",
    ),
    ("duplicate period", [GOOD, _obs("2024-01-01"), _obs("2024-01-01")], "observations[2].period"),
    ("empty batch", [], "observations"),
]


@pytest.mark.parametrize(("case", "rows", "field"), BAD_BATCHES, ids=[c[0] for c in BAD_BATCHES])
def test_bad_batches_write_nothing(
    client: TestClient,
    headers: dict[str, str],
    product: str,
    db: Database,
    case: str,
    rows: list[dict[str, Any]],
    field: str,
) -> None:
    response = client.post(product, json={"observations": rows}, headers=headers)
    assert response.status_code == 422, case
    assert response.headers["content-type"] == "application/problem+json"
    problem = response.json()
    assert problem["status"] == 422
    assert field in [e["field"] for e in problem["errors"]], problem
    assert all(e["message"] for e in problem["errors"])
    assert row_count(db.settings, "observations") == 0


@pytest.mark.parametrize("literal", ["NaN", "Infinity", "-Infinity"])
def test_non_finite_numbers_are_refused(
    client: TestClient, headers: dict[str, str], product: str, db: Database, literal: str
) -> None:
    # Python's JSON parser accepts these literals; the API must not.
    raw = '{"observations": [{"period": "2024-01-01", "price": ' + literal + ', "units": 3}]}'
    response = client.post(
        product, content=raw, headers={**headers, "content-type": "application/json"}
    )
    assert response.status_code == 422
    assert response.json()["errors"][0]["field"] == "observations[0].price"
    assert row_count(db.settings, "observations") == 0


def test_unknown_sku_is_404(client: TestClient, headers: dict[str, str], db: Database) -> None:
    response = client.post(
        "/v1/products/NOPE/observations",
        json={"observations": [_obs("2024-01-01")]},
        headers=headers,
    )
    assert response.status_code == 404
    assert response.json()["title"] == "Not found"
    assert row_count(db.settings, "observations") == 0


def test_body_over_limit_is_413(
    client: TestClient, headers: dict[str, str], product: str, db: Database
) -> None:
    limit = db.settings.body_limit_bytes
    padding = " " * (limit + 10)  # valid JSON whitespace: only the size is wrong
    raw = '{"observations": [{"period": "2024-01-01", "price": 5, "units": 1}]}' + padding
    response = client.post(
        product, content=raw, headers={**headers, "content-type": "application/json"}
    )
    assert response.status_code == 413
    assert response.headers["content-type"] == "application/problem+json"
    assert row_count(db.settings, "observations") == 0


def test_wrong_content_type_is_refused(
    client: TestClient, headers: dict[str, str], product: str
) -> None:
    response = client.post(
        product, content="period,price\n", headers={**headers, "content-type": "text/csv"}
    )
    assert response.status_code == 422
    assert response.headers["content-type"] == "application/problem+json"


@pytest.mark.parametrize("start", ["0", "20240108", "2024-01-08T00:00:00Z"])
def test_history_ranges_take_only_iso_dates(
    client: TestClient, headers: dict[str, str], start: str
) -> None:
    client.put("/v1/products/TEA-001", json={"name": "tin"}, headers=headers)
    response = client.get(
        "/v1/products/TEA-001/observations", params={"start": start}, headers=headers
    )
    assert response.status_code == 422, response.text
    assert "2026-12-01" in response.json()["errors"][0]["message"]
