"""The audit log: every state-changing operation of the OpenAPI document, called once
with valid input, writes exactly one entry with the acting key; operations that only
compute write none; the log is listed for admin keys only, filtered and paginated, and no
operation changes it."""

from __future__ import annotations

import json
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import httpx
import pytest
from fastapi.testclient import TestClient

from tests.plugins.review_cases import key_headers, linear_product, store_recommendation
from tests.plugins.storage import Database, row_count

pytestmark = pytest.mark.storage
OPENAPI = Path(__file__).resolve().parents[3] / "openapi" / "openapi.json"
WRITE_METHODS = ("post", "put", "patch", "delete")


@dataclass
class Walk:
    client: TestClient
    headers: dict[str, str]
    key_id: str
    db: Database

    def post(self, path: str, body: Any = None, **kw: Any) -> httpx.Response:
        return self.client.post(path, json=body, headers=self.headers, **kw)


Call = Callable[[], httpx.Response]


def _created_key(w: Walk) -> Call:
    return lambda: w.post("/v1/api-keys", {"name": "walk", "scopes": ["read"]})


def _revoked_key(w: Walk) -> Call:
    key_id = w.post("/v1/api-keys", {"name": "gone", "scopes": ["read"]}).json()["id"]
    return lambda: w.client.delete(f"/v1/api-keys/{key_id}", headers=w.headers)


POLICY = {"name": "tiny moves", "applies_to": "product", "target": "WALK-2", "max_change_pct": 0.1}


def _ended_policy(w: Walk) -> Call:
    made = w.post("/v1/approval-policies", {**POLICY, "name": "ended"})
    assert made.status_code == 201, made.text
    policy_id = made.json()["id"]
    return lambda: w.client.delete(f"/v1/approval-policies/{policy_id}", headers=w.headers)


RULE = {
    "name": "no loss",
    "kind": "no_sale_below_cost",
    "applies_to": "product",
    "target": "WALK-2",
}


def _ended_rule(w: Walk) -> Call:
    made = w.post("/v1/jurisdiction-rules", {**RULE, "name": "ended"})
    assert made.status_code == 201, made.text
    rule_id = made.json()["id"]
    return lambda: w.client.delete(f"/v1/jurisdiction-rules/{rule_id}", headers=w.headers)


def _deleted_product(w: Walk) -> Call:
    w.client.put("/v1/products/GONE-1", json={"name": "gone"}, headers=w.headers)
    return lambda: w.client.delete("/v1/products/GONE-1", headers=w.headers)


def _activated_fit(w: Walk) -> Call:
    fits = w.client.get("/v1/products/WALK-1/fits", headers=w.headers).json()["items"]
    earlier = next(f for f in fits if f["status"] != "active")
    return lambda: w.post(
        f"/v1/products/WALK-1/fits/{earlier['id']}/activate", {"reason": "restore"}
    )


def _approved(w: Walk) -> Call:
    rec = store_recommendation(w.client, w.headers, "WALK-2")
    return lambda: w.post(f"/v1/recommendations/{rec['id']}/approve", {})


def _declined(w: Walk) -> Call:
    rec = store_recommendation(w.client, w.headers, "WALK-2")
    return lambda: w.post(f"/v1/recommendations/{rec['id']}/decline", {"note": "not now"})


def _deleted_schedule(w: Walk) -> Call:
    w.client.put("/v1/schedules/gone", json=SCHEDULE, headers=w.headers)
    return lambda: w.client.delete("/v1/schedules/gone", headers=w.headers)


SCHEDULE = {"cron": "30 2 * * *", "job": {"kind": "refit"}}
CSV = "sku,period,price,units\nIMP-1,2024-01-01,5.0,10\n"

# How to make one valid call of each state-changing operation, and how many audit entries
# it writes (0 only for operations that compute without storing). A new operation must
# be added here: the walk fails naming it.
CASES: dict[str, tuple[int, Callable[[Walk], Call]]] = {
    "create_api_key": (1, _created_key),
    "revoke_api_key": (1, _revoked_key),
    "create_approval_policy": (1, lambda w: lambda: w.post("/v1/approval-policies", POLICY)),
    "end_approval_policy": (1, _ended_policy),
    "family_optimal_prices": (
        1,
        lambda w: lambda: w.post("/v1/families/walkers/optimal-prices", {"store": True}),
    ),
    "import_observations": (
        1,
        lambda w: (
            lambda: w.client.post(
                "/v1/imports",
                params={"create_products": "true"},
                content=CSV,
                headers={**w.headers, "content-type": "text/csv"},
            )
        ),
    ),
    "create_job": (
        1,
        lambda w: lambda: w.post("/v1/jobs", {"kind": "refit", "scope": {"skus": ["WALK-1"]}}),
    ),
    "add_jurisdiction_rule": (1, lambda w: lambda: w.post("/v1/jurisdiction-rules", RULE)),
    "end_jurisdiction_rule": (1, _ended_rule),
    "delete_product": (1, _deleted_product),
    "patch_product": (
        1,
        lambda w: (
            lambda: w.client.patch(
                "/v1/products/WALK-1", json={"name": "walker"}, headers=w.headers
            )
        ),
    ),
    "put_product": (
        1,
        lambda w: (
            lambda: w.client.put("/v1/products/NEW-1", json={"name": "new"}, headers=w.headers)
        ),
    ),
    "create_fit": (
        1,
        lambda w: lambda: w.post("/v1/products/WALK-1/fits", {"spec": {"form": "linear"}}),
    ),
    "activate_fit": (1, _activated_fit),
    "upsert_observations": (
        1,
        lambda w: (
            lambda: w.post(
                "/v1/products/WALK-1/observations",
                {"observations": [{"period": "2026-01-05", "price": 14.0, "units": 660.0}]},
            )
        ),
    ),
    "optimal_price": (
        1,
        lambda w: lambda: w.post("/v1/products/WALK-2/optimal-price", {"store": True}),
    ),
    "predict": (0, lambda w: lambda: w.post("/v1/products/WALK-2/predict", {"price": 14.0})),
    "plan_price_test": (0, lambda w: lambda: w.post("/v1/products/WALK-2/price-tests", {})),
    "approve_recommendation": (1, _approved),
    "decline_recommendation": (1, _declined),
    "delete_schedule": (1, _deleted_schedule),
    "put_schedule": (
        1,
        lambda w: lambda: w.client.put("/v1/schedules/walk", json=SCHEDULE, headers=w.headers),
    ),
}


def _write_operations() -> list[tuple[str, str, str]]:
    spec = json.loads(OPENAPI.read_text())
    return [
        (method.upper(), path, op["operationId"])
        for path, ops in spec["paths"].items()
        for method, op in ops.items()
        if method in WRITE_METHODS
    ]


def test_every_write_operation_has_a_case() -> None:
    missing = sorted(op for _, _, op in _write_operations() if op not in CASES)
    assert not missing, f"add a valid call to CASES for these operations: {missing}"
    gone = sorted(set(CASES) - {op for _, _, op in _write_operations()})
    assert not gone, f"CASES names operations the API no longer has: {gone}"


def test_each_write_operation_writes_one_entry(client: TestClient, db: Database) -> None:
    headers = key_headers(db.settings, "read", "write", "admin", "approve")
    key_id = headers["Authorization"].split("_")[1]
    for sku in ("WALK-1", "WALK-2"):
        linear_product(client, headers, sku, family="walkers")
    client.post("/v1/products/WALK-1/fits", json={"spec": {"form": "linear"}}, headers=headers)
    walk = Walk(client, headers, key_id, db)
    for method, path, operation in _write_operations():
        expected, case = CASES[operation]
        call = case(walk)
        before = row_count(db.settings, "audit_entries")
        response = call()
        assert response.status_code < 400, (operation, response.text)
        assert row_count(db.settings, "audit_entries") - before == expected, (method, path)
        if expected:
            [newest] = client.get("/v1/audit", params={"limit": 1}, headers=headers).json()["items"]
            assert newest["actor_key_id"] == key_id, (operation, newest)


def test_the_log_is_for_admins_filtered_paged_and_unchangeable(
    client: TestClient, db: Database
) -> None:
    admin = key_headers(db.settings, "admin", "write")
    writer = key_headers(db.settings, "write", "read")
    writer_id = writer["Authorization"].split("_")[1]
    for sku in ("LOG-1", "LOG-2", "LOG-3"):
        assert client.put(f"/v1/products/{sku}", json={"name": sku}, headers=writer).is_success
    client.patch("/v1/products/LOG-2", json={"name": "two"}, headers=admin)
    assert client.get("/v1/audit", headers=writer).status_code == 403

    mine = client.get("/v1/audit", params={"actor": writer_id}, headers=admin).json()["items"]
    assert [e["subject"] for e in mine] == ["LOG-3", "LOG-2", "LOG-1"]
    assert {e["action"] for e in mine} == {"put_product"}
    about = client.get("/v1/audit", params={"subject": "LOG-2"}, headers=admin).json()["items"]
    assert [e["action"] for e in about] == ["patch_product", "put_product"]
    first = client.get("/v1/audit", params={"limit": 2}, headers=admin).json()
    rest = client.get(
        "/v1/audit", params={"limit": 2, "cursor": first["next_cursor"]}, headers=admin
    ).json()
    everything = client.get("/v1/audit", headers=admin).json()["items"]
    assert [e["id"] for e in first["items"] + rest["items"]] == [e["id"] for e in everything]
    assert rest["next_cursor"] is None
    newest = everything[0]["at"]
    since = client.get("/v1/audit", params={"since": newest}, headers=admin).json()["items"]
    until = client.get("/v1/audit", params={"until": newest}, headers=admin).json()["items"]
    assert len(since) + len(until) == len(everything) and since
    # A refused change writes nothing.
    count = row_count(db.settings, "audit_entries")
    assert client.put("/v1/products/LOG-1", json={"name": ""}, headers=writer).status_code == 422
    assert row_count(db.settings, "audit_entries") == count
    # No operation changes the log.
    for method in ("DELETE", "PUT", "PATCH", "POST"):
        assert client.request(method, "/v1/audit", headers=admin).status_code == 405
    spec = json.loads(OPENAPI.read_text())
    assert set(spec["paths"]["/v1/audit"]) == {"get"}


def test_key_changes_on_the_command_line_are_audited(
    db: Database,
    client: TestClient,
    capsys: pytest.CaptureFixture[str],
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    from service.cli import main as cli_main

    monkeypatch.setattr("service.cli.get_settings", lambda: db.settings)
    admin = key_headers(db.settings, "admin")
    assert cli_main(["keys", "create", "--name", "batch", "--scope", "read"]) == 0
    key_id = capsys.readouterr().out.strip().splitlines()[-1].split("_")[1]
    assert cli_main(["keys", "revoke", key_id]) == 0
    entries = client.get("/v1/audit", params={"subject": f"key:{key_id}"}, headers=admin).json()
    assert [(e["action"], e["actor_key_id"], e["details"]["by"]) for e in entries["items"]] == [
        ("revoke_api_key", None, "command line"),
        ("create_api_key", None, "command line"),
    ]
