"""Watched outcomes over HTTP: after a stored recommendation, realised against expected
units with the fit's interval, the drift flag when demand falls, and /metrics."""

from __future__ import annotations

import pytest
from fastapi.testclient import TestClient

from service.catalogue import demo
from tests.plugins.outcome_cases import SKU, SPEC, fit_and_recommend, send_outcomes
from tests.plugins.storage import Database

pytestmark = pytest.mark.storage


@pytest.fixture
def shop(db: Database, client: TestClient, headers: dict[str, str]) -> TestClient:
    demo.load(db.settings, seed=7)
    return client


def test_nothing_is_watched_before_a_recommendation(
    shop: TestClient, headers: dict[str, str]
) -> None:
    shop.post(f"/v1/products/{SKU}/fits", json={"spec": SPEC}, headers=headers)
    body = shop.get(f"/v1/products/{SKU}/outcomes", headers=headers).json()
    assert body["watched_from"] is None and body["periods"] == [] and body["drift"] is None


def test_outcomes_compare_with_the_fits_own_prediction(
    shop: TestClient, headers: dict[str, str]
) -> None:
    fit_and_recommend(shop, headers)
    periods = send_outcomes(shop, headers, 30, fall_after=None, seed=1)
    body = shop.get(f"/v1/products/{SKU}/outcomes", headers=headers).json()
    assert [p["period"] for p in body["periods"]] == periods
    first = body["periods"][0]
    # The same figures as the prediction endpoint at that price and those drivers.
    predicted = shop.post(
        f"/v1/products/{SKU}/predict",
        json={
            "price": first["price"],
            "covariates": {"rival_price": 1.0, "promo": 0.0, "ad_spend": 200.0, "holiday": 0.0},
        },
        headers=headers,
    ).json()
    assert first["expected"] == pytest.approx(predicted["expected_units"], rel=1e-9)
    assert first["interval"] == pytest.approx(
        [predicted["interval_low"], predicted["interval_high"]], rel=1e-9
    )
    assert first["error"] == pytest.approx(first["realised"] - first["expected"], rel=1e-12)
    inside = [p["inside"] for p in body["periods"]]
    assert sum(inside) >= 25  # 95% intervals over an unchanged curve
    assert body["drift"]["flagged"] is False
    assert body["drift"]["periods_counted"] == 30
    assert body["drift"]["action"] == "none"
    errors = [abs(p["error"]) for p in body["periods"]]
    assert body["wape"] == pytest.approx(sum(errors) / sum(p["realised"] for p in body["periods"]))


def test_a_fall_in_demand_raises_the_flag_and_shows_in_metrics(
    shop: TestClient, headers: dict[str, str]
) -> None:
    fit_and_recommend(shop, headers)
    periods = send_outcomes(shop, headers, 40, fall_after=20, seed=2)
    body = shop.get(f"/v1/products/{SKU}/outcomes", headers=headers).json()
    drift = body["drift"]
    assert drift["flagged"] is True
    # Flagged after the fall, and within 20 periods of it (tests/models/test_outcomes.py).
    assert periods[20] <= drift["first_flagged_period"] < periods[39]
    assert periods.index(drift["first_flagged_period"]) < 40
    assert f"POST /v1/products/{SKU}/fits" in drift["action"]
    family = shop.get(f"/v1/families/{body['family']}/outcomes", headers=headers).json()
    row = next(p for p in family["products"] if p["sku"] == SKU)
    assert row["drift_flagged"] is True and family["products_flagged"] >= 1
    # Over time: the family's periods sum its counted products (here TEA-021 alone).
    assert [p["period"] for p in family["periods"]] == periods
    assert [p["realised"] for p in family["periods"]] == [p["realised"] for p in body["periods"]]
    assert all(p["products"] == 1 for p in family["periods"])
    others = [p for p in family["products"] if p["sku"] != SKU]
    assert all(p["reason"] for p in others)  # no fit, or nothing to watch: said, not failed
    exposition = shop.get("/metrics", headers=headers).text
    assert f'marginal_product_drift{{sku="{SKU}"}} 1.0' in exposition


def test_unknown_product_and_family_are_404(shop: TestClient, headers: dict[str, str]) -> None:
    assert shop.get("/v1/products/NOPE-1/outcomes", headers=headers).status_code == 404
    assert shop.get("/v1/families/nope/outcomes", headers=headers).status_code == 404
    never = shop.get(f"/v1/products/{SKU}/outcomes", headers=headers)
    assert never.status_code == 404 and "fit one" in never.json()["detail"]
