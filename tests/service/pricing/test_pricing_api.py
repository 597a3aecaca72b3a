"""Recommendations over HTTP: closed-form optima through the whole path, business rules,
edge cases with their messages, families, and the nightly pull of the latest ones."""

from __future__ import annotations

import datetime as dt
import math
from collections.abc import Callable

import pytest
from fastapi.testclient import TestClient

from service.catalogue import demo
from tests.plugins.storage import Database, make_key, row_count

pytestmark = pytest.mark.storage
WEEKS = [(dt.date(2025, 1, 6) + dt.timedelta(weeks=w)).isoformat() for w in range(40)]


def exact_product(
    client: TestClient,
    headers: dict[str, str],
    sku: str,
    *,
    unit_cost: float,
    prices: list[float],
    demand: Callable[[float], float],
    form: str,
) -> None:
    """A product whose history follows ``demand`` exactly (no noise), fitted in ``form``."""
    client.put(
        f"/v1/products/{sku}",
        json={"name": sku, "unit_cost": unit_cost, "current_price": prices[-1]},
        headers=headers,
    )
    rows = [
        {"period": w, "price": p, "units": demand(p)} for w, p in zip(WEEKS, prices, strict=True)
    ]
    assert (
        client.post(
            f"/v1/products/{sku}/observations", json={"observations": rows}, headers=headers
        ).status_code
        == 200
    )
    fit = client.post(
        f"/v1/products/{sku}/fits", json={"spec": {"form": form}}, headers=headers
    ).json()
    assert fit["status"] == "active", fit["gates"]


def _prices(low: float, high: float) -> list[float]:
    return [round(low + (high - low) * ((7 * i) % 40) / 39, 4) for i in range(40)]


def recommend(client: TestClient, headers: dict[str, str], sku: str, **body: object) -> dict:
    response = client.post(f"/v1/products/{sku}/optimal-price", json=body, headers=headers)
    assert response.status_code == 200, response.json()
    return dict(response.json())


def test_linear_demand_closed_forms(client: TestClient, headers: dict[str, str]) -> None:
    # Our own numbers: q = 1500 - 60 p with unit cost 5. Profit maximum
    # p* = (a/b + c)/2 = 15 with q = (a - b c)/2 = 600 and profit (a - b c)^2/(4b) = 6000
    # (Pindyck & Rubinfeld, Microeconomics, ch. 10, MR = MC on linear demand); revenue
    # maximum p = a/(2b) = 12.5 with revenue 9375 (where the point elasticity is -1).
    exact_product(
        client,
        headers,
        "LIN-1",
        unit_cost=5.0,
        prices=_prices(10.0, 20.0),
        demand=lambda p: 1500 - 60 * p,
        form="linear",
    )
    profit = recommend(client, headers, "LIN-1", objective="profit")
    assert math.isclose(profit["recommended"]["price"], 15.0, rel_tol=1e-6)
    assert math.isclose(profit["recommended"]["units"], 600.0, rel_tol=1e-6)
    assert math.isclose(profit["recommended"]["profit"], 6000.0, rel_tol=1e-6)
    assert profit["binding_constraints"] == [] and profit["warnings"] == []
    assert math.isclose(profit["unconstrained_price"], 15.0, rel_tol=1e-6)
    revenue = recommend(client, headers, "LIN-1", objective="revenue")
    assert math.isclose(revenue["recommended"]["price"], 12.5, rel_tol=1e-6)
    assert math.isclose(revenue["recommended"]["revenue"], 9375.0, rel_tol=1e-6)


@pytest.mark.parametrize("form", ["log-log", "poisson"])
def test_constant_elasticity_closed_form(
    client: TestClient, headers: dict[str, str], form: str
) -> None:
    # Constant elasticity e = -4 with marginal cost 9: p* = c e / (1 + e) = 12
    # (Pindyck & Rubinfeld, Microeconomics, 7th ed., eq. 10.2 and its worked example).
    exact_product(
        client,
        headers,
        "CE-1",
        unit_cost=9.0,
        prices=_prices(10.0, 14.0),
        demand=lambda p: 1000.0 * p**-4.0 * 1e4,
        form=form,
    )
    result = recommend(client, headers, "CE-1", objective="profit")
    assert math.isclose(result["recommended"]["price"], 12.0, rel_tol=1e-6)
    margin = (12.0 - 9.0) / 12.0  # Lerner: (p - c)/p = -1/e
    assert math.isclose(result["recommended"]["margin_pct"], 100 * margin, rel_tol=1e-6)


def test_rules_bind_and_are_reported(client: TestClient, headers: dict[str, str]) -> None:
    exact_product(
        client,
        headers,
        "LIN-2",
        unit_cost=4.0,
        prices=_prices(8.0, 16.0),
        demand=lambda p: 2000 - 100 * p,
        form="linear",
    )
    capped = recommend(client, headers, "LIN-2", constraints={"max_change_pct": 10})
    current = capped["current"]["price"]
    # On the cap, rounded to the cent on its inner side.
    moved = abs(capped["recommended"]["price"] - current)
    assert 0.1 * current - 0.01 < moved <= 0.1 * current + 1e-9
    assert capped["binding_constraints"] == ["max_change_pct"]
    ended = recommend(client, headers, "LIN-2", constraints={"price_endings": [0.49, 0.99]})
    assert round(ended["recommended"]["price"] % 1, 2) in (0.49, 0.99)
    assert ended["search"] == "allowed_prices"
    stock = recommend(client, headers, "LIN-2", constraints={"max_units": 500})
    assert math.isclose(stock["recommended"]["units"], 500.0, rel_tol=1e-6)  # p = 15
    assert "max_units" in stock["binding_constraints"]
    floor = recommend(client, headers, "LIN-2", constraints={"min_margin_pct": 75})
    assert math.isclose(floor["recommended"]["price"], 16.0, rel_tol=1e-6)  # 4 / (1 - 0.75)
    assert "min_margin_pct" in floor["binding_constraints"]


def test_extrapolation_guard(client: TestClient, headers: dict[str, str]) -> None:
    # Unit cost 18 puts the profit optimum at (2000/100 + 18)/2 = 19, above the prices
    # seen (8 to 16): by default the price stops at 16 x 1.1 = 17.6.
    exact_product(
        client,
        headers,
        "LIN-3",
        unit_cost=18.0,
        prices=_prices(8.0, 16.0),
        demand=lambda p: 2000 - 100 * p,
        form="linear",
    )
    guarded = recommend(client, headers, "LIN-3")
    assert math.isclose(guarded["recommended"]["price"], 16.0 * 1.1, rel_tol=1e-9)
    assert "observed_price_range" in guarded["binding_constraints"]
    assert "price_outside_observed_range" in [w["code"] for w in guarded["warnings"]]
    free = recommend(client, headers, "LIN-3", constraints={"allow_extrapolation": True})
    assert math.isclose(free["recommended"]["price"], 19.0, rel_tol=1e-6)
    assert "price_outside_observed_range" in [w["code"] for w in free["warnings"]]


def test_inelastic_demand_sits_on_the_bound_and_says_why(
    client: TestClient, headers: dict[str, str]
) -> None:
    exact_product(
        client,
        headers,
        "INEL-1",
        unit_cost=1.0,
        prices=_prices(10.0, 14.0),
        demand=lambda p: 500.0 * p**-0.5,
        form="log-log",
    )
    result = recommend(client, headers, "INEL-1", objective="revenue")
    assert math.isclose(result["recommended"]["price"], 14.0 * 1.1, rel_tol=1e-9)
    warning = next(w for w in result["warnings"] if w["code"] == "objective_unbounded_above")
    assert "inelastic" in warning["message"] and "upper bound" in warning["message"]
    assert result["optimum"] == "no_finite_optimum"


def test_cost_above_every_feasible_price(client: TestClient, headers: dict[str, str]) -> None:
    exact_product(
        client,
        headers,
        "COST-1",
        unit_cost=4.0,
        prices=_prices(8.0, 16.0),
        demand=lambda p: 2000 - 100 * p,
        form="linear",
    )
    result = recommend(client, headers, "COST-1", unit_cost=40.0)
    codes = [w["code"] for w in result["warnings"]]
    assert "cost_above_feasible_prices" in codes
    assert result["recommended"]["profit"] < 0


def test_infeasible_rules_are_422_naming_the_conflict(
    client: TestClient, headers: dict[str, str]
) -> None:
    exact_product(
        client,
        headers,
        "LIN-4",
        unit_cost=4.0,
        prices=_prices(8.0, 16.0),
        demand=lambda p: 2000 - 100 * p,
        form="linear",
    )
    response = client.post(
        "/v1/products/LIN-4/optimal-price",
        json={"constraints": {"min_price": 15.5, "max_change_pct": 2}},
        headers=headers,
    )  # current price 14.77
    assert response.status_code == 422
    fields = {e["field"] for e in response.json()["errors"]}
    assert {"constraints.min_price", "constraints.max_change_pct"} <= fields
    assert "no price satisfies" in response.json()["detail"]
    both = client.post(
        "/v1/products/LIN-4/optimal-price",
        json={"constraints": {"price_step": 0.05, "price_endings": [0.99]}},
        headers=headers,
    )
    assert both.status_code == 422


def test_wrong_sign_is_refused_unless_allowed(
    client: TestClient, headers: dict[str, str], db: Database
) -> None:
    demo.load(db.settings, seed=7)
    naive = {
        "form": "log-log",
        "covariates": ["rival_price", "promo", "ad_spend", "holiday"],
        "log_covariates": ["rival_price", "ad_spend"],
    }
    fit = client.post("/v1/products/TEA-001/fits", json={"spec": naive}, headers=headers).json()
    assert fit["status"] == "rejected"
    # A person (the approve scope) activates the rejected fit, with a reason; pricing it
    # is then refused unless the request allows the wrong sign.
    approver = {"Authorization": f"Bearer {make_key(db.settings, 'approve')}"}
    activated = client.post(
        f"/v1/products/TEA-001/fits/{fit['id']}/activate",
        json={"reason": "reviewed: priced only with allow_wrong_sign"},
        headers=approver,
    )
    assert activated.status_code == 200, activated.text
    refused = client.post("/v1/products/TEA-001/optimal-price", json={}, headers=headers)
    assert refused.status_code == 409
    assert "allow_wrong_sign" in refused.json()["detail"]
    allowed = recommend(client, headers, "TEA-001", allow_wrong_sign=True)
    assert "wrong_sign_allowed" in [w["code"] for w in allowed["warnings"]]
    # The switch's retired name is no alias: it is refused, naming the field.
    for path in ("/v1/products/TEA-001/optimal-price", "/v1/families/green/optimal-prices"):
        old = client.post(path, json={"force": True}, headers=headers)
        assert old.status_code == 422, old.text
        assert [e["field"] for e in old.json()["errors"]] == ["force"]


def test_uncertainty_curve_and_scenario(
    client: TestClient, headers: dict[str, str], db: Database
) -> None:
    demo.load(db.settings, seed=7)
    client.post("/v1/products/TEA-021/fits", headers=headers)
    result = recommend(
        client,
        headers,
        "TEA-021",
        uncertainty_draws=100,
        curve_points=60,
        scenario={"promo": 0, "rival_price": 1.05},
    )
    low, high = result["uncertainty"]["price_interval"]
    assert low <= result["recommended"]["price"] <= high
    assert 0.0 <= result["uncertainty"]["prob_better_than_current"] <= 1.0
    assert len(result["curve"]) == 60
    assert result["scenario"]["rival_price"] == 1.05
    for bad in ({"curve_points": 10}, {"scenario": {"weather": 1.0}}, {"uncertainty_draws": -1}):
        response = client.post("/v1/products/TEA-021/optimal-price", json=bad, headers=headers)
        assert response.status_code == 422, bad
    nothing = client.post("/v1/products/TEA-017/optimal-price", json={}, headers=headers)
    assert nothing.status_code == 404 and "no active fit" in nothing.json()["detail"]


def test_family_prices_and_the_nightly_pull(
    client: TestClient, headers: dict[str, str], db: Database
) -> None:
    demo.load(db.settings, seed=7)
    for sku in ("TEA-002", "TEA-003", "TEA-004", "TEA-005"):
        client.post(f"/v1/products/{sku}/fits", headers=headers)
    before = dt.datetime.now(dt.UTC).isoformat()
    response = client.post(
        "/v1/families/green/optimal-prices",
        json={
            "objective": "profit",
            "constraints": {"max_change_pct": 15},
            "order": [["TEA-004", "TEA-002"]],
            "max_total_change_pct": 8,
            "store": True,
        },
        headers=headers,
    )
    assert response.status_code == 200, response.json()
    body = response.json()
    prices = {p["sku"]: p["recommended"]["price"] for p in body["products"]}
    assert set(prices) == {"TEA-002", "TEA-003", "TEA-004", "TEA-005"}
    assert prices["TEA-004"] <= prices["TEA-002"] + 1e-9
    assert {e["sku"] for e in body["excluded"]} >= {"TEA-001", "TEA-006"}
    assert abs(body["total"]["price_index_change_pct"]) <= 8 + 1e-6
    ladder = client.post(
        "/v1/families/green/optimal-prices", json={"order": [["TEA-004", "NOPE"]]}, headers=headers
    )
    assert ladder.status_code == 422

    single = recommend(client, headers, "TEA-005", objective="revenue", store=True)
    latest = client.get(
        "/v1/recommendations", params={"family": "green", "state": "proposed"}, headers=headers
    ).json()["items"]
    by_sku = {r["sku"]: r for r in latest}
    assert set(by_sku) == set(prices)
    assert by_sku["TEA-005"]["id"] == single["id"] and by_sku["TEA-005"]["curve"] is None
    page = client.get(
        "/v1/recommendations",
        params={"limit": 2, "since": before, "state": "proposed"},
        headers=headers,
    ).json()
    assert len(page["items"]) == 2 and page["next_cursor"]
    rest = client.get(
        "/v1/recommendations",
        params={"limit": 2, "since": before, "state": "proposed", "cursor": page["next_cursor"]},
        headers=headers,
    ).json()
    assert [r["sku"] for r in page["items"] + rest["items"]] == sorted(prices)
    later = client.get(
        "/v1/recommendations",
        params={"since": dt.datetime.now(dt.UTC).isoformat(), "state": "any"},
        headers=headers,
    ).json()
    assert later["items"] == []


def test_a_product_deleted_while_its_price_is_worked_out_is_404(
    client: TestClient, headers: dict[str, str], db: Database
) -> None:
    # Prices are worked out in a read transaction and stored in a short write
    # transaction afterwards; a delete in between must not store an orphan or fail 500.
    from service.core.db import make_engine, make_session_factory, session_scope
    from service.core.errors import NotFound
    from service.pricing import recommendations as pricing
    from service.pricing.schemas import OptimalPriceRequest

    exact_product(
        client,
        headers,
        "GONE-1",
        unit_cost=4.0,
        prices=_prices(8.0, 16.0),
        demand=lambda p: 2000 - 100 * p,
        form="linear",
    )
    engine = make_engine(db.settings)
    with session_scope(make_session_factory(engine, writer=False)) as reader:
        priced = pricing.recommend(
            reader, sku="GONE-1", body=OptimalPriceRequest(objective="profit")
        )
    assert client.delete("/v1/products/GONE-1", headers=headers).status_code == 204
    with pytest.raises(NotFound), session_scope(make_session_factory(engine, writer=True)) as w:
        pricing.store(w, [priced])
    engine.dispose()
    assert row_count(db.settings, "recommendations") == 0


@pytest.mark.parametrize(
    ("since", "ok"),
    [
        ("2026-12-01T00:00:00Z", True),
        ("2026-12-01T00:00:00.5+01:00", True),
        ("7", False),  # pydantic alone reads a number as seconds since 1970
        ("2026-12-01", False),  # a date is not a date-time
        ("2026-12-01T00:00:00", False),  # RFC 3339 needs the offset
    ],
)
def test_since_takes_only_rfc3339_date_times(
    client: TestClient, headers: dict[str, str], since: str, ok: bool
) -> None:
    response = client.get("/v1/recommendations", params={"since": since}, headers=headers)
    assert response.status_code == (200 if ok else 422), response.text
    if not ok:
        assert response.json()["errors"][0]["field"].endswith("since")


@pytest.mark.storage
def test_an_unencoded_plus_in_since_is_explained(
    client: TestClient, headers: dict[str, str]
) -> None:
    # A bare "+" in a query string means a space (HTML form encoding), so the offset of
    # "...+01:00" is lost on the way; the refusal says how to send it.
    response = client.get("/v1/recommendations?since=2026-12-01T00:00:00+01:00", headers=headers)
    assert response.status_code == 422
    assert "%2B" in response.json()["errors"][0]["message"]
    encoded = client.get("/v1/recommendations?since=2026-12-01T00:00:00%2B01:00", headers=headers)
    assert encoded.status_code == 200
