"""Jurisdiction rules: added, listed and ended over HTTP with audit entries, and each
kind's price limits and breaches worked out from the price record.

The figures are arithmetic on invented prices: a cap of p% over a reference r allows at
most r (1 + p/100); the reference is the lowest price live in the window before the
moment (the prior price of article 6a of the EU Price Indication Directive 98/6/EC, as
amended by Directive (EU) 2019/2161, with its 30-day window).
"""

from __future__ import annotations

import datetime as dt
import json

import pytest
import sqlalchemy as sa
from fastapi.testclient import TestClient

from service.core.db import make_engine, make_session_factory, session_scope
from service.core.tables import ProductRow
from service.pricing import price_record, rule_limits
from tests.plugins.storage import Database, make_key

pytestmark = pytest.mark.storage

NOW = dt.datetime(2026, 12, 3, 12, 0, tzinfo=dt.UTC)


@pytest.fixture
def admin(db: Database) -> dict[str, str]:
    return {"Authorization": f"Bearer {make_key(db.settings, 'read', 'write', 'admin')}"}


@pytest.fixture
def keys(db: Database, admin: dict[str, str]) -> dict[str, dict[str, str]]:
    return {
        "all": admin,
        "approve": {"Authorization": f"Bearer {make_key(db.settings, 'approve')}"},
    }


@pytest.fixture
def shop(client: TestClient, admin: dict[str, str]) -> TestClient:
    for sku, family in (("TEA-R1", "herbal"), ("TEA-R2", "green")):
        body = {"name": sku, "unit_cost": 4.0, "current_price": 5.0, "family": family}
        assert client.put(f"/v1/products/{sku}", json=body, headers=admin).status_code == 201
    return client


def _rule(client: TestClient, headers: dict[str, str], **body: object) -> dict:
    made = client.post("/v1/jurisdiction-rules", json=body, headers=headers)
    assert made.status_code == 201, made.json()
    return dict(made.json())


def _limits(
    db: Database, sku: str, prices: tuple[tuple[float, float], ...] = (), **kwargs: object
) -> tuple[rule_limits.RuleLimits, list[str]]:
    """Record live prices ((price, days before NOW), oldest first), then the limits at
    NOW and the rules a price of 6.00 would break."""
    engine = make_engine(db.settings)
    with session_scope(make_session_factory(engine, writer=True)) as session:
        product_id = session.scalar(sa.select(ProductRow.id).where(ProductRow.sku == sku))
        assert product_id is not None
        for price, days in prices:
            price_record.add_entry(
                session,
                product_id=product_id,
                price=price,
                effective_from=NOW - dt.timedelta(days=days),
                set_by_key_id=None,
            )
        facts = rule_limits.product_facts(session, product_id)
        found = rule_limits.limits_for(session, facts, at=NOW, **kwargs)  # type: ignore[arg-type]
        broken = rule_limits.rule_breaches(session, product_id=product_id, price=6.0, at=NOW)
    engine.dispose()
    return found, broken


def _one(found: rule_limits.RuleLimits) -> tuple[str, float | None, float | None]:
    (limit,) = found.limits
    return limit.name, limit.low, limit.high


def test_below_cost_is_a_floor_at_the_unit_cost(
    shop: TestClient, db: Database, admin: dict[str, str]
) -> None:
    _rule(shop, admin, name="Cost floor", kind="no_sale_below_cost", applies_to="catalogue")
    found, broken = _limits(db, "TEA-R1")
    assert _one(found) == ("Cost floor", 4.0, None) and broken == []
    what_if, _ = _limits(db, "TEA-R1", unit_cost=6.5)  # a what-if cost: 6.00 is below it
    assert _one(what_if) == ("Cost floor", 6.5, None)
    assert rule_limits.breaches(what_if.limits, 6.0) == ["Cost floor"]
    assert rule_limits.breaches(what_if.limits, 6.5) == []
    assert found.named_limits()[0].name == "rule:Cost floor"


def test_emergency_cap_applies_only_during_its_period(
    shop: TestClient, db: Database, admin: dict[str, str]
) -> None:
    common = {"kind": "emergency_increase_cap", "max_increase_pct": 10, "window_days": 7}
    _rule(
        shop,
        admin,
        name="Past storm",
        applies_to="catalogue",
        **common,
        starts_on="2026-11-01",
        ends_on="2026-11-30",
    )
    _rule(
        shop,
        admin,
        name="Flood",
        applies_to="family",
        target="herbal",
        **common,
        starts_on="2026-12-01",
        ends_on="2026-12-03",
    )
    # 5.00 from 20 days ago, 5.40 from 5 days ago: the lowest of the last 7 days is 5.00
    # (live at the window's start), so the cap is 5.50 and 6.00 breaks it.
    found, broken = _limits(db, "TEA-R1", ((5.0, 20), (5.4, 5)))
    name, low, high = _one(found)
    assert (name, low) == ("Flood", None) and high == pytest.approx(5.5)
    assert broken == ["Flood"]
    other, _ = _limits(db, "TEA-R2")  # green: only the past storm, which is over
    assert other.limits == ()


def test_min_interval_holds_the_live_price(
    shop: TestClient, db: Database, admin: dict[str, str]
) -> None:
    _rule(
        shop,
        admin,
        name="Weekly",
        kind="min_change_interval",
        applies_to="product",
        target="TEA-R1",
        min_interval_days=7,
    )
    unchanged, _ = _limits(db, "TEA-R1")  # no price record: nothing has changed
    assert unchanged.limits == ()
    found, broken = _limits(db, "TEA-R1", ((5.2, 3),))
    assert _one(found) == ("Weekly", 5.2, 5.2) and broken == ["Weekly"]


def test_min_interval_passed_leaves_the_price_free(
    shop: TestClient, db: Database, admin: dict[str, str]
) -> None:
    _rule(
        shop,
        admin,
        name="Weekly",
        kind="min_change_interval",
        applies_to="catalogue",
        min_interval_days=7,
    )
    found, broken = _limits(db, "TEA-R1", ((5.2, 7),))  # exactly 7 days: passed
    assert found.limits == () and broken == []


def test_prior_price_cap_over_the_lowest_price_of_30_days(
    shop: TestClient, db: Database, admin: dict[str, str]
) -> None:
    _rule(
        shop,
        admin,
        name="Prior +20%",
        kind="prior_price_cap",
        applies_to="catalogue",
        max_increase_pct=20,
    )
    # No record: the current price 5.00 stands in, cap 6.00, which 6.00 does not break.
    free, broken = _limits(db, "TEA-R2")
    assert _one(free)[2] == pytest.approx(6.0) and broken == []
    # 4.50 from 40 days ago (live 30 days ago), 5.50 from 10 days ago: reference 4.50.
    found, broken = _limits(db, "TEA-R1", ((4.5, 40), (5.5, 10)))
    assert _one(found)[2] == pytest.approx(5.4) and broken == ["Prior +20%"]


def test_a_rule_without_its_figures_is_not_applied(
    shop: TestClient, db: Database, admin: dict[str, str]
) -> None:
    assert (
        shop.patch(
            "/v1/products/TEA-R1", json={"unit_cost": None, "current_price": None}, headers=admin
        ).status_code
        == 200
    )
    _rule(shop, admin, name="Cost floor", kind="no_sale_below_cost", applies_to="catalogue")
    _rule(
        shop,
        admin,
        name="Prior +5%",
        kind="prior_price_cap",
        applies_to="catalogue",
        max_increase_pct=5,
    )
    found, broken = _limits(db, "TEA-R1")
    assert found.limits == () and broken == []
    assert found.not_applied == (
        ("Cost floor", "the product has no unit cost"),
        ("Prior +5%", "no earlier price is known"),
    )


def test_rules_are_added_listed_and_ended(
    shop: TestClient, db: Database, keys: dict[str, dict[str, str]]
) -> None:
    admin = keys["all"]
    refused = [
        {"name": "x", "kind": "prior_price_cap", "applies_to": "catalogue"},
        {"name": "x", "kind": "min_change_interval", "applies_to": "catalogue"},
        {"name": "x", "kind": "no_sale_below_cost", "applies_to": "family"},
        {"name": "x", "kind": "no_sale_below_cost", "applies_to": "catalogue", "window_days": 3},
        {
            "name": "x",
            "kind": "emergency_increase_cap",
            "applies_to": "catalogue",
            "max_increase_pct": 10,
            "window_days": 7,
            "starts_on": "2026-02-01",
            "ends_on": "2026-01-01",
        },
        {"name": "x", "kind": "price_freeze", "applies_to": "catalogue"},
    ]
    for body in refused:
        assert shop.post("/v1/jurisdiction-rules", json=body, headers=admin).status_code == 422
    unknown = {"name": "x", "kind": "no_sale_below_cost", "applies_to": "product", "target": "NO"}
    assert shop.post("/v1/jurisdiction-rules", json=unknown, headers=admin).status_code == 422
    below = {"name": "Cost floor", "kind": "no_sale_below_cost", "applies_to": "catalogue"}
    assert (
        shop.post("/v1/jurisdiction-rules", json=below, headers=keys["approve"]).status_code == 403
    )
    made = _rule(shop, admin, **below)
    assert made["in_effect"] is True and made["ended_at"] is None
    assert shop.post("/v1/jurisdiction-rules", json=below, headers=admin).status_code == 409
    listed = shop.get("/v1/products/TEA-R1/jurisdiction-rules", headers=admin).json()
    assert [r["name"] for r in listed["items"]] == ["Cost floor"]

    ended = shop.delete(f"/v1/jurisdiction-rules/{made['id']}", headers=admin)
    assert ended.status_code == 200 and ended.json()["in_effect"] is False
    assert shop.delete(f"/v1/jurisdiction-rules/{made['id']}", headers=admin).status_code == 409
    assert shop.delete("/v1/jurisdiction-rules/999999", headers=admin).status_code == 404
    everything = shop.get("/v1/jurisdiction-rules", headers=admin).json()["items"]
    assert [(r["name"], r["in_effect"]) for r in everything] == [("Cost floor", False)]
    assert shop.get("/v1/jurisdiction-rules?in_effect=true", headers=admin).json()["items"] == []
    assert shop.get("/v1/products/TEA-R1/jurisdiction-rules", headers=admin).json()["items"] == []
    again = _rule(shop, admin, **below)  # the name is free once the rule has ended
    assert again["id"] != made["id"]

    engine = make_engine(db.settings)
    with engine.connect() as conn:
        rows = conn.execute(
            sa.text("SELECT action, subject, details FROM audit_entries ORDER BY id")
        ).all()
    engine.dispose()
    entries = [
        (a, s, d if isinstance(d, dict) else json.loads(d))
        for a, s, d in rows
        if a in ("add_rule", "end_rule")
    ]
    assert [(a, s) for a, s, _ in entries] == [
        ("add_rule", f"rule:{made['id']}"),
        ("end_rule", f"rule:{made['id']}"),
        ("add_rule", f"rule:{again['id']}"),
    ]
    assert entries[0][2]["name"] == "Cost floor" and entries[1][2]["ended_at"] is not None
