"""Demand estimation over HTTP: fit versions, gates, the active model, elasticities, predict."""

from __future__ import annotations

import math

import pytest
from fastapi.testclient import TestClient

from service.catalogue import demo
from tests.plugins.storage import Database, row_count

pytestmark = pytest.mark.storage

NAIVE = {
    "form": "log-log",
    "covariates": ["rival_price", "promo", "ad_spend", "holiday"],
    "log_covariates": ["rival_price", "ad_spend"],
}
WITH_COST_INSTRUMENT = {**NAIVE, "instruments": ["unit_cost"]}


@pytest.fixture
def shop(db: Database, client: TestClient, headers: dict[str, str]) -> TestClient:
    demo.load(db.settings, seed=7)
    return client


def test_fit_versions_and_activation(shop: TestClient, headers: dict[str, str]) -> None:
    first = shop.post("/v1/products/TEA-021/fits", headers=headers)  # the product's default spec
    assert first.status_code == 201, first.json()
    body = first.json()
    assert (body["version"], body["status"], body["sku"]) == (1, "active", "TEA-021")
    assert body["spec"]["form"] == "auto" and body["form"] in body["candidate_scores"]
    assert body["gates"]["passed"] is True
    assert {g["name"] for g in body["gates"]["checks"]} == {
        "wrong_sign",
        "price_variation",
        "enough_observations",
        "holdout_not_worse",
    }
    assert body["window"]["n_stockouts_excluded"] > 0
    assert "stockouts_excluded" in [w["code"] for w in body["warnings"]]
    assert body["coefficients"][0]["term"] == "intercept"
    assert body["quality"]["n_obs"] == body["n_obs"] > 80
    assert " + -" not in body["equation"]

    second = shop.post("/v1/products/TEA-021/fits", json={"spec": NAIVE}, headers=headers)
    assert second.json()["version"] == 2 and second.json()["status"] == "active"
    listed = shop.get("/v1/products/TEA-021/fits", params={"limit": 1}, headers=headers).json()
    assert [f["version"] for f in listed["items"]] == [2]
    older = shop.get(
        "/v1/products/TEA-021/fits",
        params={"limit": 1, "cursor": listed["next_cursor"]},
        headers=headers,
    ).json()
    assert [(f["version"], f["status"]) for f in older["items"]] == [(1, "superseded")]
    assert older["next_cursor"] is None

    active = shop.get("/v1/products/TEA-021/demand-model", headers=headers).json()
    assert active["id"] == second.json()["id"]
    one = shop.get(f"/v1/products/TEA-021/fits/{body['id']}", headers=headers)
    assert one.json()["status"] == "superseded"
    other = shop.get(f"/v1/products/TEA-022/fits/{body['id']}", headers=headers)
    assert other.status_code == 404


def test_a_failing_fit_is_rejected_and_the_active_one_kept(
    shop: TestClient, headers: dict[str, str]
) -> None:
    # TEA-001 was priced up in strong weeks: plain least squares gets a rising demand
    # curve, while the unit cost (a supply shifter) as instrument recovers a falling one.
    good = shop.post(
        "/v1/products/TEA-001/fits", json={"spec": WITH_COST_INSTRUMENT}, headers=headers
    ).json()
    assert good["status"] == "active", good["gates"]
    assert good["diagnostics"]["first_stage_f"] > 10
    bad = shop.post("/v1/products/TEA-001/fits", json={"spec": NAIVE}, headers=headers).json()
    assert bad["status"] == "rejected"
    failed = [g["name"] for g in bad["gates"]["checks"] if not g["passed"]]
    assert failed == ["wrong_sign"]
    assert "wrong_sign" in [w["code"] for w in bad["warnings"]]
    active = shop.get("/v1/products/TEA-001/demand-model", headers=headers).json()
    assert active["id"] == good["id"]


def test_flat_price_product_is_rejected(shop: TestClient, headers: dict[str, str]) -> None:
    body = shop.post("/v1/products/TEA-009/fits", json={"spec": NAIVE}, headers=headers).json()
    assert body["status"] == "rejected"
    assert [g["name"] for g in body["gates"]["checks"] if not g["passed"]] == ["price_variation"]
    missing = shop.get("/v1/products/TEA-009/demand-model", headers=headers)
    assert missing.status_code == 404
    assert "POST /v1/products/TEA-009/fits" in missing.json()["detail"]


def test_too_little_data_says_how_much_more(
    shop: TestClient, headers: dict[str, str], db: Database
) -> None:
    response = shop.post("/v1/products/TEA-017/fits", json={"spec": NAIVE}, headers=headers)
    assert response.status_code == 422
    detail = response.json()["detail"]
    assert "8 usable observations" in detail and "more)" in detail
    # Both thresholds: what the model needs to be fitted, and what the gate needs to
    # activate it (settings.gate_min_observations, 30 by default).
    assert "to become the active fit it needs at least 30" in detail
    assert row_count(db.settings, "fits") == 0


@pytest.mark.parametrize(
    ("spec", "field"),
    [
        ({"form": "cubic"}, "spec.form"),
        ({"standard_errors": "robust-ish"}, "spec.standard_errors"),
        ({"window_periods": "all"}, "spec.window_periods"),
        ({"colour": "red"}, "spec.colour"),
        ({"cross_prices": ["NOPE-1"]}, "spec.cross_prices"),
    ],
)
def test_bad_specs_are_422(
    shop: TestClient, headers: dict[str, str], db: Database, spec: dict[str, object], field: str
) -> None:
    response = shop.post("/v1/products/TEA-021/fits", json={"spec": spec}, headers=headers)
    assert response.status_code == 422
    assert field in [e["field"] for e in response.json()["errors"]]
    assert row_count(db.settings, "fits") == 0


def test_unknown_product_is_404(shop: TestClient, headers: dict[str, str]) -> None:
    assert shop.post("/v1/products/NOPE/fits", headers=headers).status_code == 404


def test_elasticities(shop: TestClient, headers: dict[str, str]) -> None:
    fit = shop.post(
        "/v1/products/TEA-021/fits",
        json={"spec": {**NAIVE, "cross_prices": demo.demo_spec_cross("TEA-021")}},
        headers=headers,
    ).json()
    at_mean = shop.get("/v1/products/TEA-021/elasticities", headers=headers).json()
    own = at_mean["elasticities"][0]
    assert (own["name"], own["kind"]) == ("price", "own")
    # In the log-log form the own-price elasticity is the ln(price) coefficient everywhere
    # (Wooldridge, Introductory Econometrics, sec. 2.4; from memory).
    coefficient = next(c for c in fit["coefficients"] if c["term"] == "ln(price)")
    assert math.isclose(own["value"], coefficient["estimate"], rel_tol=1e-12)
    assert own["ci_low"] < own["value"] < own["ci_high"]
    assert own["class"] in {"elastic", "inelastic", "unit-elastic"}
    kinds = {e["kind"] for e in at_mean["elasticities"]}
    assert kinds == {"own", "cross", "covariate"}
    cross = [e for e in at_mean["elasticities"] if e["kind"] == "cross"]
    assert all(e["class"] in {"substitute", "complement", "no clear relation"} for e in cross)
    latest = shop.get(
        "/v1/products/TEA-021/elasticities", params={"at": "latest"}, headers=headers
    ).json()
    assert latest["at"] == "latest"
    given = shop.get(
        "/v1/products/TEA-021/elasticities",
        params={"at": "price:99,promo:1", "income_like": "ad_spend"},
        headers=headers,
    ).json()
    assert given["at"] == "given" and given["point"]["price"] == 99
    assert given["warnings"][0]["code"] == "price_outside_observed_range"
    ad = next(e for e in given["elasticities"] if e["name"] == "ad_spend")
    assert ad["class"] in {"inferior", "necessity", "luxury"}
    unknown = shop.get(
        "/v1/products/TEA-021/elasticities", params={"at": "weather:3"}, headers=headers
    )
    assert unknown.status_code == 422
    malformed = shop.get(
        "/v1/products/TEA-021/elasticities", params={"at": "price=3"}, headers=headers
    )
    assert malformed.status_code == 422


def test_linear_form_elasticity_uses_the_predicted_units(
    shop: TestClient, headers: dict[str, str]
) -> None:
    # Point elasticity of a linear demand curve: (dQ/dP) * P / Q (Samuelson & Marks,
    # Managerial Economics, eq. 3.8b), with Q the predicted units at that point.
    fit = shop.post(
        "/v1/products/TEA-021/fits",
        json={"spec": {**NAIVE, "form": "linear", "log_covariates": []}},
        headers=headers,
    ).json()
    slope = next(c for c in fit["coefficients"] if c["term"] == "price")["estimate"]
    point = shop.get(
        "/v1/products/TEA-021/elasticities", params={"at": "price:7.5"}, headers=headers
    ).json()
    own = point["elasticities"][0]["value"]
    mean_units = _linear_units(fit, point["point"])
    assert math.isclose(own, slope * 7.5 / mean_units, rel_tol=1e-9)


def _linear_units(fit: dict[str, object], point: dict[str, float]) -> float:
    total = 0.0
    for c in fit["coefficients"]:  # type: ignore[attr-defined]
        term = c["term"]
        value = 1.0 if term == "intercept" else point[term]
        total += c["estimate"] * value
    return total


def test_predict(shop: TestClient, headers: dict[str, str]) -> None:
    shop.post("/v1/products/TEA-021/fits", json={"spec": NAIVE}, headers=headers)
    fit = shop.get("/v1/products/TEA-021/demand-model", headers=headers).json()
    low, high = fit["price_range"]
    price = (low + high) / 2
    inside = shop.post(
        "/v1/products/TEA-021/predict", json={"price": price, "unit_cost": 2.0}, headers=headers
    ).json()
    assert inside["interval_low"] < inside["expected_units"] < inside["interval_high"]
    assert math.isclose(inside["revenue"], price * inside["expected_units"], rel_tol=1e-12)
    assert math.isclose(inside["profit"], (price - 2.0) * inside["expected_units"], rel_tol=1e-12)
    assert inside["warnings"] == []
    cheaper = shop.post("/v1/products/TEA-021/predict", json={"price": low}, headers=headers)
    assert cheaper.json()["expected_units"] > inside["expected_units"]
    assert cheaper.json()["unit_cost"] is not None  # the product's own cost by default
    outside = shop.post(
        "/v1/products/TEA-021/predict", json={"price": high * 1.5}, headers=headers
    ).json()
    assert [w["code"] for w in outside["warnings"]] == ["price_outside_observed_range"]
    unknown = shop.post(
        "/v1/products/TEA-021/predict",
        json={"price": price, "covariates": {"weather": 1}},
        headers=headers,
    )
    assert unknown.status_code == 422
    assert unknown.json()["errors"][0]["field"] == "covariates.weather"
    negative = shop.post("/v1/products/TEA-021/predict", json={"price": -1}, headers=headers)
    assert negative.status_code == 422


def test_no_active_fit_is_404_everywhere(shop: TestClient, headers: dict[str, str]) -> None:
    for method, path, body in [
        ("GET", "/v1/products/TEA-021/demand-model", None),
        ("GET", "/v1/products/TEA-021/elasticities", None),
        ("POST", "/v1/products/TEA-021/predict", {"price": 5.0}),
    ]:
        response = shop.request(method, path, json=body, headers=headers)
        assert response.status_code == 404, path
        assert response.headers["content-type"] == "application/problem+json"


def test_the_database_allows_one_active_fit_per_product(
    shop: TestClient, headers: dict[str, str], db: Database
) -> None:
    import sqlalchemy as sa

    from service.core.db import make_engine

    shop.post("/v1/products/TEA-021/fits", json={"spec": NAIVE}, headers=headers)
    shop.post("/v1/products/TEA-021/fits", json={"spec": NAIVE}, headers=headers)
    engine = make_engine(db.settings)
    with pytest.raises(sa.exc.IntegrityError), engine.begin() as conn:
        conn.execute(sa.text("UPDATE fits SET status = 'active' WHERE version = 1"))
    engine.dispose()


def test_family_pooling_reports_raw_and_pooled(shop: TestClient, headers: dict[str, str]) -> None:
    spec = {**NAIVE, "pooling": "family"}
    body = shop.post("/v1/products/TEA-021/fits", json={"spec": spec}, headers=headers).json()
    pooled = body["pooled"]
    assert pooled["family"] == "oolong"  # TEA-021 is an oolong tin
    own = next(c for c in body["coefficients"] if c["term"] == "ln(price)")
    assert math.isclose(pooled["raw"], own["estimate"], rel_tol=1e-12)
    assert 0 <= pooled["weight_on_family"] <= 1
    assert pooled["n_products"] >= 5
    # Shrinkage moves the estimate toward the family mean, never past it.
    low, high = sorted((pooled["raw"], pooled["family_mean"]))
    assert low - 1e-12 <= pooled["pooled"] <= high + 1e-12
    assert pooled["pooled_std_error"] <= pooled["raw_std_error"] + 1e-12
    report = shop.get("/v1/products/TEA-021/elasticities", headers=headers).json()
    assert report["pooled"] == pooled


def test_window_note_in_the_answer_the_stored_fit_and_the_view(
    shop: TestClient, headers: dict[str, str]
) -> None:
    whole = shop.post("/v1/products/TEA-021/fits", json={"spec": NAIVE}, headers=headers).json()
    n_periods = whole["window"]["n_window"]
    # The default window holds the demo's whole history: no note.
    assert whole["window"]["n_window_excluded"] == 0
    assert whole["window"]["window_excluded_from"] is None
    assert "window_excluded" not in [w["code"] for w in whole["warnings"]]

    short = {**NAIVE, "window_periods": n_periods - 20}
    body = shop.post("/v1/products/TEA-021/fits", json={"spec": short}, headers=headers).json()
    assert body["window"]["n_window_excluded"] == 20
    oldest = body["window"]["window_excluded_from"]
    assert oldest is not None and oldest < body["window"]["first_period"]
    note = next(w["message"] for w in body["warnings"] if w["code"] == "window_excluded")
    assert note.startswith(f"20 older periods (from {oldest})")
    stored = shop.get("/v1/products/TEA-021/demand-model", headers=headers).json()
    assert stored["window"]["n_window_excluded"] == 20 and stored["id"] == body["id"]

    key = headers["Authorization"].split()[1]
    signed = shop.post("/ui/sign-in", data={"key": key, "next": "/ui/"}, follow_redirects=False)
    assert signed.status_code == 303, signed.text
    page = shop.get("/ui/products/TEA-021")
    assert page.status_code == 200
    assert "older weeks outside the window" in page.text and oldest in page.text


def test_levels_instrument_and_hc1_errors_over_http(
    shop: TestClient, headers: dict[str, str]
) -> None:
    spec = {**WITH_COST_INSTRUMENT, "standard_errors": "hc1"}
    levels = shop.post("/v1/products/TEA-021/fits", json={"spec": spec}, headers=headers)
    assert levels.status_code == 201, levels.json()
    logged = shop.post(
        "/v1/products/TEA-021/fits",
        json={"spec": {**spec, "log_instruments": ["unit_cost"]}},
        headers=headers,
    )
    assert logged.status_code == 201, logged.json()
    # The same instrument in levels and in logs gives different first stages.
    first = levels.json()["diagnostics"]["first_stage_f"]
    assert first != logged.json()["diagnostics"]["first_stage_f"]
    bad = shop.post(
        "/v1/products/TEA-021/fits",
        json={"spec": {**NAIVE, "log_instruments": ["unit_cost"]}},
        headers=headers,
    )
    assert bad.status_code == 422 and "log_instruments" in bad.text
    own = shop.get("/v1/products/TEA-021/elasticities", headers=headers).json()["elasticities"][0]
    assert own["class"] in {"elastic", "inelastic", "unit-elastic", "unclear", "wrong sign"}
