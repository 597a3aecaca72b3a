"""Price tests over HTTP: a plan from the active fit, else the latest rejected one."""

from __future__ import annotations

import datetime as dt
import math

import pytest
from fastapi.testclient import TestClient

from service.catalogue import demo
from tests.plugins.storage import Database, make_key, row_count

pytestmark = pytest.mark.storage


@pytest.fixture
def shop(db: Database, client: TestClient, headers: dict[str, str]) -> TestClient:
    demo.load(db.settings, seed=7)
    return client


def test_a_flat_priced_product_gets_a_plan_from_its_rejected_fit(
    shop: TestClient, headers: dict[str, str]
) -> None:
    # TEA-009 is the demo's product whose price never moved: its fit is rejected.
    made = shop.post("/v1/products/TEA-009/fits", headers=headers).json()
    assert made["status"] == "rejected"
    product = shop.get("/v1/products/TEA-009", headers=headers).json()
    answer = shop.post(
        "/v1/products/TEA-009/price-tests", json={"periods": 8, "step_pct": 5}, headers=headers
    )
    assert answer.status_code == 200, answer.json()
    plan = answer.json()
    assert (plan["fit_id"], plan["fit_status"]) == (made["id"], "rejected")
    assert plan["centre_price"] == product["current_price"]
    assert math.isclose(plan["high_price"], product["current_price"] * 1.05, rel_tol=1e-12)
    assert math.isclose(plan["low_price"], product["current_price"] * 0.95, rel_tol=1e-12)
    prices = [p["price"] for p in plan["periods"]]
    assert prices == [plan["high_price"], plan["low_price"]] * 4
    assert [p["index"] for p in plan["periods"]] == list(range(1, 9))
    # Weekly periods from the week after the latest observed one.
    latest = dt.date.fromisoformat(_latest_period(shop, headers, "TEA-009"))
    assert [p["period"] for p in plan["periods"]] == [
        (latest + dt.timedelta(weeks=i + 1)).isoformat() for i in range(8)
    ]
    assert plan["id"] is None and plan["created_at"] is None
    # The fit could hardly see the price effect: a test of 8 periods should teach a lot.
    assert 0 < plan["narrowing"] < 0.5
    assert math.isclose(
        plan["expected_std_error"], plan["std_error"] * plan["narrowing"], rel_tol=1e-12
    )
    low, high = plan["elasticity_interval"]
    new_low, new_high = plan["expected_elasticity_interval"]
    assert math.isclose(new_high - new_low, (high - low) * plan["narrowing"], rel_tol=1e-9)
    assert any("price_variation" in r for r in plan["reasons"])
    # Revenue given up is the centre's revenue less the test's, period by period.
    centre_revenue = plan["centre_price"] * 8 * _units_at(plan, plan["centre_price"])
    test_revenue = sum(p["price"] * p["expected_units"] for p in plan["periods"])
    assert math.isclose(plan["revenue_given_up"], centre_revenue - test_revenue, rel_tol=1e-9)
    assert plan["profit_given_up_upper"] >= plan["profit_given_up"]


def _latest_period(client: TestClient, headers: dict[str, str], sku: str) -> str:
    page = client.get(f"/v1/products/{sku}/observations", headers=headers).json()
    return str(page["items"][-1]["period"])


def _units_at(plan: dict[str, object], price: float) -> float:
    """Units at the centre from the log-log curve through the two test prices."""
    periods = plan["periods"]
    assert isinstance(periods, list)
    (p1, q1), (p2, q2) = [(p["price"], p["expected_units"]) for p in periods[:2]]
    slope = math.log(q1 / q2) / math.log(p1 / p2)
    return float(q1 * (price / p1) ** slope)


def test_bounds_hold_and_bad_input_is_refused(shop: TestClient, headers: dict[str, str]) -> None:
    shop.post("/v1/products/TEA-021/fits", headers=headers)
    product = shop.get("/v1/products/TEA-021", headers=headers).json()
    cap = product["current_price"] * 1.02
    plan = shop.post(
        "/v1/products/TEA-021/price-tests", json={"max_price": cap}, headers=headers
    ).json()
    assert plan["fit_status"] == "active"
    assert max(p["price"] for p in plan["periods"]) == cap
    for body, field in [
        ({"periods": 1}, "periods"),
        ({"step_pct": 0}, "step_pct"),
        ({"centre_price": -3}, "centre_price"),
    ]:
        refused = shop.post("/v1/products/TEA-021/price-tests", json=body, headers=headers)
        assert refused.status_code == 422, body
        assert refused.json()["errors"][0]["field"] == field
    no_room = shop.post(
        "/v1/products/TEA-021/price-tests",
        json={"min_price": cap * 2, "max_price": cap * 3},
        headers=headers,
    )
    assert no_room.status_code == 422
    assert "no room" in no_room.json()["detail"]


def test_never_fitted_and_unknown_products_are_404(
    shop: TestClient, headers: dict[str, str]
) -> None:
    never = shop.post("/v1/products/TEA-021/price-tests", json={}, headers=headers)
    assert never.status_code == 404 and "fit one" in never.json()["detail"]
    unknown = shop.post("/v1/products/NOPE-1/price-tests", json={}, headers=headers)
    assert unknown.status_code == 404


def test_a_stored_plan_marks_its_periods_and_is_audited(
    db: Database, shop: TestClient, headers: dict[str, str]
) -> None:
    shop.post("/v1/products/TEA-009/fits", headers=headers)
    body = {"periods": 4, "step_pct": 5, "first_period": "2026-02-02", "store": True}
    reader = {"Authorization": f"Bearer {make_key(db.settings, 'read')}"}
    refused = shop.post("/v1/products/TEA-009/price-tests", json=body, headers=reader)
    assert refused.status_code == 403
    assert row_count(db.settings, "price_tests") == 0
    audited = row_count(db.settings, "audit_entries")
    stored = shop.post("/v1/products/TEA-009/price-tests", json=body, headers=headers)
    assert stored.status_code == 200, stored.json()
    plan = stored.json()
    assert plan["id"] is not None and plan["created_at"] is not None
    assert [p["period"] for p in plan["periods"]] == [
        "2026-02-02",
        "2026-02-09",
        "2026-02-16",
        "2026-02-23",
    ]
    assert row_count(db.settings, "audit_entries") == audited + 1
    listed = shop.get("/v1/products/TEA-009/price-tests", headers=headers).json()["items"]
    assert [p["id"] for p in listed] == [plan["id"]]
    assert listed[0]["periods"] == plan["periods"]
    # A plan over any of the same periods is refused; nothing more is stored.
    again = shop.post(
        "/v1/products/TEA-009/price-tests",
        json={**body, "first_period": "2026-02-16"},
        headers=headers,
    )
    assert again.status_code == 409 and again.json()["errors"][0]["field"] == "first_period"
    assert row_count(db.settings, "price_tests") == 1
    # Observations sent for the plan's periods are its test periods; others are not.
    rows = [
        {"period": p["period"], "price": p["price"], "units": 50.0, "in_stock": True}
        for p in plan["periods"]
    ] + [{"period": "2026-03-02", "price": 7.2, "units": 50.0, "in_stock": True}]
    sent = shop.post(
        "/v1/products/TEA-009/observations", json={"observations": rows}, headers=headers
    )
    assert sent.status_code in (200, 201), sent.json()
    page = shop.get(
        "/v1/products/TEA-009/observations", params={"start": "2026-01-01"}, headers=headers
    ).json()
    marks = {o["period"]: o["price_test_id"] for o in page["items"]}
    assert marks == {**{p["period"]: plan["id"] for p in plan["periods"]}, "2026-03-02": None}
