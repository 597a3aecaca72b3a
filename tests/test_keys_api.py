"""API keys: scopes per route, revocation, the admin endpoints and the CLI."""

from __future__ import annotations

import hashlib

import pytest
import sqlalchemy as sa
from fastapi.testclient import TestClient

from service.cli import main as cli_main
from service.db import make_engine
from tests.conftest import Database, make_key

pytestmark = pytest.mark.storage

# (method, path, body, scope needed)
ROUTES = [
    ("GET", "/v1/products", None, "read"),
    ("GET", "/v1/products/TEA-001", None, "read"),
    ("PUT", "/v1/products/TEA-001", {"name": "tin"}, "write"),
    ("PATCH", "/v1/products/TEA-001", {"name": "tin"}, "write"),
    ("DELETE", "/v1/products/TEA-001", None, "admin"),
    ("GET", "/v1/products/TEA-001/observations", None, "read"),
    (
        "POST",
        "/v1/products/TEA-001/observations",
        {"observations": [{"period": "2024-01-01", "price": 1, "units": 1}]},
        "write",
    ),
    ("POST", "/v1/imports", None, "write"),
    ("GET", "/v1/api-keys", None, "admin"),
    ("POST", "/v1/api-keys", {"name": "x", "scopes": ["read"]}, "admin"),
    ("DELETE", "/v1/api-keys/abc", None, "admin"),
]


def _call(client: TestClient, method: str, path: str, body: object, key: str | None) -> int:
    headers = {"Authorization": f"Bearer {key}"} if key else {}
    if path == "/v1/imports":
        headers["content-type"] = "text/csv"
        return client.request(
            method, path, content="sku,period,price,units\n", headers=headers
        ).status_code
    return client.request(method, path, json=body, headers=headers).status_code


@pytest.mark.parametrize(
    ("method", "path", "body", "scope"), ROUTES, ids=[f"{m} {p}" for m, p, _, _ in ROUTES]
)
def test_every_route_checks_its_scope(
    client: TestClient, db: Database, method: str, path: str, body: object, scope: str
) -> None:
    assert _call(client, method, path, body, None) == 401
    assert _call(client, method, path, body, "mk_nothing_here") == 401
    assert _call(client, method, path, body, "not-even-the-format") == 401
    for other in {"read", "write", "admin"} - {scope}:
        assert _call(client, method, path, body, make_key(db.settings, other)) == 403
    allowed = _call(client, method, path, body, make_key(db.settings, scope))
    assert allowed not in (401, 403)


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
