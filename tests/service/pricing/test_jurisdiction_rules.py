"""Jurisdiction rules in the optimiser: each kind holds the recommended price (the answer
names it in ``binding_rules``), for a product, a family and a reprice job; approvals that
would break a rule are in test_rule_approvals.py. The product's demand and its closed-form
optimum (6.00 without rules) are described in tests/plugins/rule_cases.py.
"""

from __future__ import annotations

import datetime as dt
import json

import pytest
import sqlalchemy as sa
from fastapi.testclient import TestClient

from service.core.db import make_engine, make_session_factory, session_scope
from tests.plugins.rule_cases import OPTIMUM, add_rule, exact_product, price, record_prices
from tests.plugins.storage import Database, make_key

pytestmark = pytest.mark.storage


@pytest.fixture
def admin(db: Database) -> dict[str, str]:
    return {"Authorization": f"Bearer {make_key(db.settings, 'read', 'write', 'admin')}"}


@pytest.fixture
def shop(client: TestClient, admin: dict[str, str]) -> TestClient:
    exact_product(client, admin, "TEA-R1")
    return client


def test_without_rules_the_closed_form_optimum(shop: TestClient, admin: dict[str, str]) -> None:
    answer = price(shop, admin, "TEA-R1")
    assert answer["recommended"]["price"] == pytest.approx(OPTIMUM, abs=0.005)  # closed form
    assert answer["binding_rules"] == [] and answer["rules_applied"] == []


def test_no_sale_below_cost(shop: TestClient, admin: dict[str, str]) -> None:
    add_rule(shop, admin, name="Below-cost ban", kind="no_sale_below_cost", applies_to="catalogue")
    # A what-if unit cost of 7 puts the cost above the revenue optimum (which ignores the
    # cost): with constant elasticity -3 revenue falls as the price rises, so without the
    # rule the price would sit at the lowest allowed price, 3.60.
    answer = price(shop, admin, "TEA-R1", objective="revenue", unit_cost=7.0)
    assert answer["recommended"]["price"] == pytest.approx(7.0)
    assert answer["binding_rules"] == ["Below-cost ban"]
    assert "rule:Below-cost ban" not in answer["binding_constraints"]
    assert [r["low"] for r in answer["rules_applied"]] == [7.0]
    conflict = shop.post(
        "/v1/products/TEA-R1/optimal-price",
        json={"objective": "revenue", "unit_cost": 7.0, "constraints": {"max_price": 6.5}},
        headers=admin,
    )
    assert conflict.status_code == 422  # no price meets both: the answer names the rule
    problem = conflict.json()
    assert "jurisdiction rule Below-cost ban needs a price of at least 7" in problem["detail"]
    assert "rule:Below" not in problem["detail"]
    assert {
        "field": "rules",
        "message": "jurisdiction rule Below-cost ban conflicts with the others",
    } in problem["errors"]
    assert {"field": "constraints.max_price", "message": "conflicts with the others"} in (
        problem["errors"]
    )


def test_emergency_increase_cap(shop: TestClient, db: Database, admin: dict[str, str]) -> None:
    record_prices(db.settings, "TEA-R1", (5.0, 20), (4.8, 3))
    today = dt.datetime.now(dt.UTC).date()
    over = {"kind": "emergency_increase_cap", "applies_to": "product", "target": "TEA-R1"}
    window = {"max_increase_pct": 10.0, "window_days": 7}
    add_rule(
        shop,
        admin,
        name="Storm of last year",
        **over,
        **window,
        starts_on=(today - dt.timedelta(days=400)).isoformat(),
        ends_on=(today - dt.timedelta(days=380)).isoformat(),
    )
    assert price(shop, admin, "TEA-R1")["binding_rules"] == []  # period over
    add_rule(
        shop,
        admin,
        name="Flood emergency",
        **over,
        **window,
        starts_on=(today - dt.timedelta(days=1)).isoformat(),
        ends_on=(today + dt.timedelta(days=1)).isoformat(),
    )
    answer = price(shop, admin, "TEA-R1")
    # The lowest price of the last 7 days is 4.80 (since 3 days ago); 10% above it: 5.28.
    assert answer["recommended"]["price"] == pytest.approx(5.28)
    assert answer["binding_rules"] == ["Flood emergency"]
    assert answer["optimum"] == "held_by_rule" and "Flood emergency" in answer["summary"]


def test_min_change_interval_holds_theprice(
    shop: TestClient, db: Database, admin: dict[str, str]
) -> None:
    record_prices(db.settings, "TEA-R1", (5.2, 2))
    add_rule(
        shop,
        admin,
        name="One change a week",
        kind="min_change_interval",
        applies_to="catalogue",
        min_interval_days=7,
    )
    answer = price(shop, admin, "TEA-R1")
    assert answer["recommended"]["price"] == pytest.approx(5.2)  # held at the live price
    assert answer["binding_rules"] == ["One change a week"]
    assert answer["rules_applied"][0]["low"] == answer["rules_applied"][0]["high"] == 5.2


def test_prior_price_cap_uses_the_lowest_price_of_the_window(
    shop: TestClient, db: Database, admin: dict[str, str]
) -> None:
    # 4.50 from 40 days ago (still live 30 days ago), then 5.50 from 10 days ago: the
    # lowest price of the 30 days before now is 4.50.
    record_prices(db.settings, "TEA-R1", (4.5, 40), (5.5, 10))
    add_rule(
        shop,
        admin,
        name="Prior price plus 20%",
        kind="prior_price_cap",
        applies_to="product",
        target="TEA-R1",
        max_increase_pct=20.0,
    )
    answer = price(shop, admin, "TEA-R1")
    assert answer["recommended"]["price"] == pytest.approx(5.4)  # 4.50 * 1.2
    assert answer["binding_rules"] == ["Prior price plus 20%"]


def test_a_family_rule_binds_family_prices(client: TestClient, admin: dict[str, str]) -> None:
    for sku in ("TEA-F1", "TEA-F2"):
        exact_product(client, admin, sku, family="herbal")
    add_rule(
        client,
        admin,
        name="Herbal prior cap",
        kind="prior_price_cap",
        applies_to="family",
        target="herbal",
        max_increase_pct=10.0,
    )
    answer = client.post("/v1/families/herbal/optimal-prices", json={}, headers=admin)
    assert answer.status_code == 200, answer.json()
    body = answer.json()
    assert body["optimum"] == "held_by_rule" and "rule:" not in body["summary"]
    assert "jurisdiction rule Herbal prior cap" in body["summary"]
    for product in body["products"]:
        # No price record: the current price 5.00 stands in; 10% above it is 5.50.
        assert product["recommended"]["price"] == pytest.approx(5.5)
        assert product["binding_rules"] == ["Herbal prior cap"]


def test_a_reprice_job_applies_the_rules(
    shop: TestClient, db: Database, admin: dict[str, str]
) -> None:
    from service.jobs import queue as jobs
    from service.jobs.worker import JobRunner

    add_rule(
        shop,
        admin,
        name="Cap at 10% over prior",
        kind="prior_price_cap",
        applies_to="catalogue",
        max_increase_pct=10.0,
    )
    engine = make_engine(db.settings)
    with session_scope(make_session_factory(engine, writer=True)) as session:
        job_id = jobs.create(session, kind="reprice", scope={"skus": ["TEA-R1"]}).id
    runner = JobRunner(engine, db.settings)
    runner.claim(job_id)
    runner.run(job_id)
    with engine.connect() as conn:
        stored = conn.execute(sa.text("SELECT result FROM recommendations")).scalar_one()
    engine.dispose()
    result = stored if isinstance(stored, dict) else json.loads(stored)
    # No price record: the current price 5.00 stands in; 10% above it is 5.50.
    assert result["recommended"]["price"] == pytest.approx(5.5)
    assert result["binding_rules"] == ["Cap at 10% over prior"]
