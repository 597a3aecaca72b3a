"""A product whose latest fit was rejected says so: which gate, why, and what may help."""

from __future__ import annotations

import pytest
import sqlalchemy as sa
from fastapi.testclient import TestClient

from service.catalogue import demo
from service.core.db import make_engine
from tests.plugins.storage import Database

pytestmark = pytest.mark.storage

ASKED = [
    ("GET", "/v1/products/{sku}/demand-model", None),
    ("GET", "/v1/products/{sku}/elasticities", None),
    ("POST", "/v1/products/{sku}/predict", {"price": 5.0}),
    ("POST", "/v1/products/{sku}/optimal-price", {}),
]


@pytest.fixture
def shop(db: Database, client: TestClient, headers: dict[str, str]) -> TestClient:
    demo.load(db.settings, seed=7)
    return client


def test_never_fitted_says_fit_one(shop: TestClient, headers: dict[str, str]) -> None:
    for method, path, body in ASKED:
        answer = shop.request(method, path.format(sku="TEA-021"), json=body, headers=headers)
        assert answer.status_code == 404, path
        assert "fit one with POST /v1/products/TEA-021/fits" in answer.json()["detail"]


@pytest.mark.parametrize(
    ("sku", "gate", "remedy"),
    [
        # The demo's two traps: a wrong-signed price effect and a price that never moved.
        ("TEA-001", "wrong_sign", "/v1/products/TEA-001/price-tests"),
        ("TEA-009", "price_variation", "/v1/products/TEA-009/price-tests"),
    ],
)
def test_a_rejected_latest_fit_names_its_gate_and_what_may_help(
    shop: TestClient, headers: dict[str, str], sku: str, gate: str, remedy: str
) -> None:
    made = shop.post(f"/v1/products/{sku}/fits", headers=headers).json()
    assert made["status"] == "rejected"
    failed = [c for c in made["gates"]["checks"] if not c["passed"]]
    assert gate in [c["name"] for c in failed]
    for method, path, body in ASKED:
        answer = shop.request(method, path.format(sku=sku), json=body, headers=headers)
        assert answer.status_code == 404, path
        problem = answer.json()
        detail = problem["detail"]
        assert f"latest fit (version {made['version']}) was rejected" in detail, detail
        assert gate in detail and remedy in detail
        assert "different spec" in detail
        # A person may still activate it (approve scope), and price a wrong sign knowingly.
        assert f"/v1/products/{sku}/fits/{made['id']}/activate" in detail
        assert ("allow_wrong_sign" in detail) is (gate == "wrong_sign")
        assert f"/v1/products/{sku}/fits/{made['id']}" in detail
        # One error item per failed gate, carrying the gate's own reason.
        assert [e["message"] for e in problem["errors"]] == [
            f"{c['name']}: {c['detail']}" for c in failed
        ]


def test_a_fit_awaiting_review_says_who_can_activate_it(
    shop: TestClient, headers: dict[str, str], db: Database
) -> None:
    made = shop.post("/v1/products/TEA-001/fits", headers=headers).json()
    engine = make_engine(db.settings)
    with engine.begin() as conn:  # as the gates leave a fit for a person (fit_review)
        conn.execute(
            sa.text("UPDATE fits SET status = 'awaiting_review' WHERE id = :id"),
            {"id": made["id"]},
        )
    engine.dispose()
    answer = shop.get("/v1/products/TEA-001/demand-model", headers=headers)
    assert answer.status_code == 404
    detail = answer.json()["detail"]
    assert f"latest fit (version {made['version']}) awaits a person's review" in detail
    assert f"POST /v1/products/TEA-001/fits/{made['id']}/activate" in detail
