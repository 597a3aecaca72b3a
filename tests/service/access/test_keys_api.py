"""API keys: scopes per route, revocation, the admin endpoints and the CLI."""

from __future__ import annotations

import hashlib
import time

import pytest
import sqlalchemy as sa
from fastapi.testclient import TestClient

from service.cli import main as cli_main
from service.core.db import make_engine
from service.core.settings import Settings
from tests.plugins.storage import Database, make_key

pytestmark = pytest.mark.storage

# (method, route template, concrete path, body, scope needed): every /v1 route.
SCHEDULE = {"cron": "30 2 * * *", "job": {"kind": "refit"}}
ROUTES = [
    ("GET", "/v1/products", "/v1/products", None, "read"),
    ("GET", "/v1/products/{sku}", "/v1/products/TEA-001", None, "read"),
    ("PUT", "/v1/products/{sku}", "/v1/products/TEA-001", {"name": "tin"}, "write"),
    ("PATCH", "/v1/products/{sku}", "/v1/products/TEA-001", {"name": "tin"}, "write"),
    ("DELETE", "/v1/products/{sku}", "/v1/products/TEA-001", None, "admin"),
    ("GET", "/v1/products/{sku}/observations", "/v1/products/TEA-001/observations", None, "read"),
    (
        "POST",
        "/v1/products/{sku}/observations",
        "/v1/products/TEA-001/observations",
        {"observations": [{"period": "2024-01-01", "price": 1, "units": 1}]},
        "write",
    ),
    ("POST", "/v1/imports", "/v1/imports", None, "write"),
    ("POST", "/v1/products/{sku}/fits", "/v1/products/TEA-001/fits", {}, "write"),
    ("GET", "/v1/products/{sku}/fits", "/v1/products/TEA-001/fits", None, "read"),
    ("GET", "/v1/products/{sku}/fits/{fit_id}", "/v1/products/TEA-001/fits/1", None, "read"),
    (
        "POST",
        "/v1/products/{sku}/fits/{fit_id}/activate",
        "/v1/products/TEA-001/fits/1/activate",
        {"reason": "reviewed"},
        "approve",
    ),
    ("GET", "/v1/products/{sku}/demand-model", "/v1/products/TEA-001/demand-model", None, "read"),
    ("GET", "/v1/products/{sku}/elasticities", "/v1/products/TEA-001/elasticities", None, "read"),
    ("POST", "/v1/products/{sku}/predict", "/v1/products/TEA-001/predict", {"price": 1.0}, "read"),
    (
        "POST",
        "/v1/products/{sku}/price-tests",
        "/v1/products/TEA-001/price-tests",
        {},
        "read",
    ),
    ("GET", "/v1/products/{sku}/price-tests", "/v1/products/TEA-001/price-tests", None, "read"),
    ("GET", "/v1/products/{sku}/outcomes", "/v1/products/TEA-001/outcomes", None, "read"),
    ("GET", "/v1/families/{family}/outcomes", "/v1/families/green/outcomes", None, "read"),
    ("POST", "/v1/products/{sku}/optimal-price", "/v1/products/TEA-001/optimal-price", {}, "read"),
    (
        "POST",
        "/v1/families/{family}/optimal-prices",
        "/v1/families/green/optimal-prices",
        {},
        "read",
    ),
    ("GET", "/v1/recommendations", "/v1/recommendations", None, "read"),
    (
        "POST",
        "/v1/recommendations/{recommendation_id}/approve",
        "/v1/recommendations/1/approve",
        {},
        "approve",
    ),
    (
        "POST",
        "/v1/recommendations/{recommendation_id}/decline",
        "/v1/recommendations/1/decline",
        {"note": "no"},
        "approve",
    ),
    ("GET", "/v1/products/{sku}/prices", "/v1/products/TEA-001/prices", None, "read"),
    (
        "POST",
        "/v1/approval-policies",
        "/v1/approval-policies",
        {"name": "p", "applies_to": "catalogue", "max_change_pct": 1},
        "approve",
    ),
    ("GET", "/v1/approval-policies", "/v1/approval-policies", None, "read"),
    ("DELETE", "/v1/approval-policies/{policy_id}", "/v1/approval-policies/1", None, "approve"),
    ("GET", "/v1/audit", "/v1/audit", None, "admin"),
    (
        "POST",
        "/v1/jurisdiction-rules",
        "/v1/jurisdiction-rules",
        {"name": "floor", "kind": "no_sale_below_cost", "applies_to": "catalogue"},
        "admin",
    ),
    ("GET", "/v1/jurisdiction-rules", "/v1/jurisdiction-rules", None, "read"),
    ("DELETE", "/v1/jurisdiction-rules/{rule_id}", "/v1/jurisdiction-rules/1", None, "admin"),
    (
        "GET",
        "/v1/products/{sku}/jurisdiction-rules",
        "/v1/products/TEA-001/jurisdiction-rules",
        None,
        "read",
    ),
    ("POST", "/v1/jobs", "/v1/jobs", {"kind": "refit"}, "write"),
    ("GET", "/v1/jobs", "/v1/jobs", None, "read"),
    ("GET", "/v1/jobs/{job_id}", "/v1/jobs/1", None, "read"),
    ("GET", "/v1/schedules", "/v1/schedules", None, "admin"),
    ("GET", "/v1/schedules/{name}", "/v1/schedules/nightly", None, "admin"),
    ("PUT", "/v1/schedules/{name}", "/v1/schedules/nightly", SCHEDULE, "admin"),
    ("DELETE", "/v1/schedules/{name}", "/v1/schedules/nightly", None, "admin"),
    ("GET", "/v1/api-keys", "/v1/api-keys", None, "admin"),
    ("POST", "/v1/api-keys", "/v1/api-keys", {"name": "x", "scopes": ["read"]}, "admin"),
    ("DELETE", "/v1/api-keys/{key_id}", "/v1/api-keys/abc", None, "admin"),
]
EXTRA_ROUTES: list[tuple[str, str, str, object, str]] = [
    # The chart route; its content and caching are tested in tests/test_ui_view.py.
    (
        "GET",
        "/v1/products/{sku}/charts/{kind}.svg",
        "/v1/products/TEA-001/charts/demand.svg",
        None,
        "read",
    ),
]
"""Routes added by other modules register here (see the test of completeness)."""


def test_the_table_covers_every_route(client: TestClient) -> None:
    from fastapi.routing import APIRoute

    served = {
        (method, route.path)
        for route in client.app.routes  # type: ignore[attr-defined]
        if isinstance(route, APIRoute) and route.path.startswith("/v1/")
        for method in route.methods
    }
    covered = {(m, t) for m, t, _, _, _ in ROUTES + EXTRA_ROUTES}
    assert served - covered == set(), "add the new routes to ROUTES with their scope"


def _call(client: TestClient, method: str, path: str, body: object, key: str | None) -> int:
    """The status of one call; only authentication and scope are of interest here."""
    headers = {"Authorization": f"Bearer {key}"} if key else {}
    if path == "/v1/imports":
        headers["content-type"] = "text/csv"
        return client.request(
            method, path, content="sku,period,price,units\n", headers=headers
        ).status_code
    return client.request(method, path, json=body, headers=headers).status_code


@pytest.mark.parametrize(
    ("method", "template", "path", "body", "scope"),
    ROUTES,
    ids=[f"{m} {t}" for m, t, _, _, _ in ROUTES],
)
def test_every_route_checks_its_scope(
    client: TestClient,
    db: Database,
    method: str,
    template: str,
    path: str,
    body: object,
    scope: str,
) -> None:
    assert _call(client, method, path, body, None) == 401
    assert _call(client, method, path, body, "mk_nothing_here") == 401
    assert _call(client, method, path, body, "not-even-the-format") == 401
    for other in {"read", "write", "admin"} - {scope}:
        assert _call(client, method, path, body, make_key(db.settings, other)) == 403
    allowed_key = make_key(db.settings, scope)
    assert _call(client, method, path, body, allowed_key) not in (401, 403)
    revoked = make_key(db.settings, scope, name="revoked")
    admin = {"Authorization": f"Bearer {make_key(db.settings, 'admin')}"}
    client.delete(f"/v1/api-keys/{revoked.split('_')[1]}", headers=admin)
    assert _call(client, method, path, body, revoked) == 401


def test_unauthenticated_is_problem_json_with_challenge(client: TestClient) -> None:
    response = client.get("/v1/products")
    assert response.status_code == 401
    assert response.headers["content-type"] == "application/problem+json"
    assert response.headers["www-authenticate"].startswith("Bearer")


def test_create_list_revoke_over_http(client: TestClient, db: Database) -> None:
    admin = {"Authorization": f"Bearer {make_key(db.settings, 'admin')}"}
    created = client.post(
        "/v1/api-keys", json={"name": "nightly", "scopes": ["read"]}, headers=admin
    )
    assert created.status_code == 201
    secret = created.json()["secret"]
    reader = {"Authorization": f"Bearer {secret}"}
    assert client.get("/v1/products", headers=reader).status_code == 200
    listed = client.get("/v1/api-keys", headers=admin).json()["items"]
    assert {k["name"] for k in listed} == {"test", "nightly"}
    assert all("secret" not in k for k in listed)
    assert secret not in str(listed)
    key_id = created.json()["id"]
    assert client.delete(f"/v1/api-keys/{key_id}", headers=admin).status_code == 204
    assert client.get("/v1/products", headers=reader).status_code == 401
    assert client.delete("/v1/api-keys/ffff", headers=admin).status_code == 404
    bad = client.post("/v1/api-keys", json={"name": "x", "scopes": ["root"]}, headers=admin)
    assert bad.status_code == 422


def test_only_a_hash_is_stored(client: TestClient, db: Database) -> None:
    secret = make_key(db.settings, "read")
    engine = make_engine(db.settings)
    with engine.connect() as conn:
        stored = conn.execute(sa.text("SELECT secret_hash FROM api_keys")).scalar_one()
    engine.dispose()
    raw_secret = secret.split("_", 2)[2]
    assert stored == hashlib.sha256(raw_secret.encode()).hexdigest()
    assert raw_secret not in stored


def test_cli_create_list_revoke(
    db: Database,
    client: TestClient,
    capsys: pytest.CaptureFixture[str],
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    monkeypatch.setattr("service.cli.get_settings", lambda: db.settings)
    assert cli_main(["keys", "create", "--name", "ci", "--scope", "read", "--scope", "write"]) == 0
    secret = capsys.readouterr().out.strip().splitlines()[-1]
    assert secret.startswith("mk_")
    assert (
        client.get("/v1/products", headers={"Authorization": f"Bearer {secret}"}).status_code == 200
    )
    assert cli_main(["keys", "list"]) == 0
    listing = capsys.readouterr().out
    assert "ci\tread,write\tactive" in listing and secret.split("_", 2)[2] not in listing
    key_id = secret.split("_")[1]
    assert cli_main(["keys", "revoke", key_id]) == 0
    assert (
        client.get("/v1/products", headers={"Authorization": f"Bearer {secret}"}).status_code == 401
    )


def test_cors_is_off_by_default_and_configurable(db: Database) -> None:
    from service.core.app import create_app

    preflight = {"Origin": "https://shop.example", "Access-Control-Request-Method": "GET"}
    with TestClient(create_app(db.settings)) as plain:
        response = plain.options("/v1/products", headers=preflight)
        assert "access-control-allow-origin" not in response.headers
    allowed = db.settings.model_copy(update={"cors_origins": ["https://shop.example"]})
    with TestClient(create_app(allowed)) as open_to_shop:
        response = open_to_shop.options("/v1/products", headers=preflight)
        assert response.headers["access-control-allow-origin"] == "https://shop.example"
        other = open_to_shop.options(
            "/v1/products", headers={**preflight, "Origin": "https://elsewhere.example"}
        )
        assert "access-control-allow-origin" not in other.headers


def test_key_comparison_is_constant_time(
    client: TestClient, db: Database, monkeypatch: pytest.MonkeyPatch
) -> None:
    import hmac

    from service.access import auth

    calls: list[tuple[str, str]] = []
    original = hmac.compare_digest

    def recording(a: str, b: str) -> bool:
        calls.append((a, b))
        return original(a, b)

    monkeypatch.setattr(auth.hmac, "compare_digest", recording)
    good = make_key(db.settings, "read")
    key_id = good.split("_")[1]
    assert (
        client.get("/v1/products", headers={"Authorization": f"Bearer {good}"}).status_code == 200
    )
    wrong_secret = f"mk_{key_id}_{'x' * 43}"
    unknown_id = f"mk_ffffffffffff_{'x' * 43}"
    for token in (wrong_secret, unknown_id):
        response = client.get("/v1/products", headers={"Authorization": f"Bearer {token}"})
        assert response.status_code == 401
    # every attempt, even for an unknown key id, went through the constant-time comparison
    assert len(calls) == 3


def _revoke_behind_the_process(settings: Settings, key_id: str) -> None:
    """What another server process's revocation looks like to this one: only the row changes."""
    engine = make_engine(settings)
    with engine.begin() as conn:
        conn.execute(
            sa.text("UPDATE api_keys SET revoked_at = CURRENT_TIMESTAMP WHERE id = :id"),
            {"id": key_id},
        )
    engine.dispose()


@pytest.mark.parametrize(("cache_seconds", "wait"), [(0.3, 0.35), (0.0, 0.0)])
def test_verified_keys_lapse_within_the_cache_time(
    db: Database, cache_seconds: float, wait: float
) -> None:
    from service.core.app import create_app

    settings = db.settings.model_copy(update={"auth_cache_seconds": cache_seconds})
    secret = make_key(settings, "read")
    reader = {"Authorization": f"Bearer {secret}"}
    with TestClient(create_app(settings)) as client:
        assert client.get("/v1/products", headers=reader).status_code == 200
        _revoke_behind_the_process(settings, secret.split("_")[1])
        # Revoked elsewhere: trusted at most auth_cache_seconds longer (0: not at all).
        time.sleep(wait)
        assert client.get("/v1/products", headers=reader).status_code == 401


def test_a_cached_key_never_admits_a_wrong_secret(client: TestClient, db: Database) -> None:
    secret = make_key(db.settings, "read")
    assert (
        client.get("/v1/products", headers={"Authorization": f"Bearer {secret}"}).status_code == 200
    )
    forged = secret[:-4] + ("AAAA" if not secret.endswith("AAAA") else "BBBB")
    assert (
        client.get("/v1/products", headers={"Authorization": f"Bearer {forged}"}).status_code == 401
    )
