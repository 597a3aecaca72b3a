"""Jurisdiction rules at approval: a stored recommendation approved at a price that
breaks a rule in effect is refused with 409 naming the rule, and nothing goes live; a
price within the rules is approved. One test per kind of rule. The product's demand and
its closed-form optimum (6.00 without rules) are described in tests/plugins/rule_cases.py;
the limits are arithmetic on the invented prices recorded below.
"""

from __future__ import annotations

import datetime as dt

import pytest
import sqlalchemy as sa
from fastapi.testclient import TestClient

from service.core.db import make_engine
from service.core.settings import Settings
from tests.plugins.rule_cases import COST, add_rule, exact_product, price, record_prices
from tests.plugins.storage import Database, make_key

pytestmark = pytest.mark.storage


@pytest.fixture
def keys(db: Database) -> dict[str, dict[str, str]]:
    def auth(*scopes: str) -> dict[str, str]:
        return {"Authorization": f"Bearer {make_key(db.settings, *scopes)}"}

    return {"admin": auth("read", "write", "admin"), "approve": auth("read", "approve")}


@pytest.fixture
def shop(client: TestClient, keys: dict[str, dict[str, str]]) -> TestClient:
    exact_product(client, keys["admin"], "TEA-R1")
    return client


def _stored(client: TestClient, keys: dict[str, dict[str, str]]) -> int:
    return int(price(client, keys["admin"], "TEA-R1", store=True)["id"])


def _approve(
    client: TestClient, keys: dict[str, dict[str, str]], recommendation_id: int, value: float
) -> tuple[int, dict]:
    answer = client.post(
        f"/v1/recommendations/{recommendation_id}/approve",
        json={"price": value},
        headers=keys["approve"],
    )
    return answer.status_code, dict(answer.json())


def _live(settings: Settings) -> list[float]:
    """The product's price record, oldest first."""
    engine = make_engine(settings)
    with engine.connect() as conn:
        rows = conn.execute(
            sa.text(
                "SELECT e.price FROM price_entries e JOIN products p ON p.id = e.product_id "
                "WHERE p.sku = 'TEA-R1' ORDER BY e.effective_from"
            )
        ).all()
    engine.dispose()
    return [float(r[0]) for r in rows]


def _refused_then_allowed(
    client: TestClient,
    db: Database,
    keys: dict[str, dict[str, str]],
    name: str,
    breaking: float,
    allowed: float,
) -> None:
    recommendation = _stored(client, keys)
    before = _live(db.settings)
    status, body = _approve(client, keys, recommendation, breaking)
    assert status == 409, body
    assert name in body["detail"]
    assert {"field": "price", "message": f"breaks {name}"} in body["errors"]
    assert _live(db.settings) == before  # nothing went live
    status, body = _approve(client, keys, recommendation, allowed)
    assert status == 200, body
    assert _live(db.settings) == [*before, allowed]


def test_below_cost_blocks_an_approval(
    shop: TestClient, db: Database, keys: dict[str, dict[str, str]]
) -> None:
    add_rule(
        shop,
        keys["admin"],
        name="Below-cost ban",
        kind="no_sale_below_cost",
        applies_to="catalogue",
    )
    _refused_then_allowed(shop, db, keys, "Below-cost ban", COST - 0.5, COST)


def test_emergency_cap_blocks_an_approval(
    shop: TestClient, db: Database, keys: dict[str, dict[str, str]]
) -> None:
    record_prices(db.settings, "TEA-R1", (5.0, 20), (4.8, 3))
    today = dt.datetime.now(dt.UTC).date()
    add_rule(
        shop,
        keys["admin"],
        name="Flood emergency",
        kind="emergency_increase_cap",
        applies_to="product",
        target="TEA-R1",
        max_increase_pct=10.0,
        window_days=7,
        starts_on=(today - dt.timedelta(days=1)).isoformat(),
        ends_on=(today + dt.timedelta(days=1)).isoformat(),
    )
    # The lowest price of the 7 days before is 4.80; 10% above it is 5.28.
    _refused_then_allowed(shop, db, keys, "Flood emergency", 5.30, 5.28)


def test_min_interval_blocks_an_approval(
    shop: TestClient, db: Database, keys: dict[str, dict[str, str]]
) -> None:
    record_prices(db.settings, "TEA-R1", (5.2, 2))
    add_rule(
        shop,
        keys["admin"],
        name="One change a week",
        kind="min_change_interval",
        applies_to="catalogue",
        min_interval_days=7,
    )
    # Changed 2 days ago: only the live price 5.20 may be approved.
    _refused_then_allowed(shop, db, keys, "One change a week", 6.0, 5.2)


def test_prior_price_cap_blocks_an_approval(
    shop: TestClient, db: Database, keys: dict[str, dict[str, str]]
) -> None:
    record_prices(db.settings, "TEA-R1", (4.5, 40), (5.5, 10))
    add_rule(
        shop,
        keys["admin"],
        name="Prior price plus 20%",
        kind="prior_price_cap",
        applies_to="product",
        target="TEA-R1",
        max_increase_pct=20.0,
    )
    # The lowest price of the 30 days before is 4.50 (live 30 days ago); 20% above: 5.40.
    _refused_then_allowed(shop, db, keys, "Prior price plus 20%", 5.5, 5.4)


def test_an_ended_rule_no_longer_blocks(shop: TestClient, keys: dict[str, dict[str, str]]) -> None:
    rule = add_rule(
        shop,
        keys["admin"],
        name="Below-cost ban",
        kind="no_sale_below_cost",
        applies_to="catalogue",
    )
    recommendation = _stored(shop, keys)
    assert _approve(shop, keys, recommendation, COST - 0.5)[0] == 409
    ended = shop.delete(f"/v1/jurisdiction-rules/{rule['id']}", headers=keys["admin"])
    assert ended.status_code == 200
    assert _approve(shop, keys, recommendation, COST - 0.5)[0] == 200
