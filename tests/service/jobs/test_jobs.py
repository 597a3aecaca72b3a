"""Refit jobs end to end: gates, incremental runs, scopes, the background worker, crashes."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from collections.abc import Iterator
from pathlib import Path

import pytest
import sqlalchemy as sa
from fastapi.testclient import TestClient

from service.catalogue import demo
from service.core.app import create_app
from service.core.db import make_engine
from service.core.settings import Settings
from service.jobs.worker import JobRunner
from tests.plugins.storage import Database, row_count

pytestmark = pytest.mark.storage
TRAPS = {"TEA-001": "wrong_sign", "TEA-009": "price_variation"}
SHORT_HISTORY = "TEA-017"
ROOT = Path(__file__).resolve().parent.parent


@pytest.fixture
def shop(db: Database, client: TestClient) -> TestClient:
    demo.load(db.settings, seed=7)
    return client


def run_queued(settings: Settings) -> list[int]:
    """Run every queued job here, the way the worker thread would."""
    engine = make_engine(settings)
    runner = JobRunner(engine, settings)
    done = []
    while (job_id := runner.claim()) is not None:
        runner.run(job_id)
        done.append(job_id)
    engine.dispose()
    return done


def active_fits(settings: Settings) -> dict[str, int]:
    engine = make_engine(settings)
    with engine.connect() as conn:
        rows = conn.execute(
            sa.text(
                "SELECT p.sku, count(f.id) FROM products p LEFT JOIN fits f "
                "ON f.product_id = p.id AND f.status = 'active' GROUP BY p.sku"
            )
        ).all()
    engine.dispose()
    return {sku: int(n) for sku, n in rows}


def test_refit_job_activates_passing_fits_and_rejects_the_traps(
    shop: TestClient, headers: dict[str, str], db: Database
) -> None:
    created = shop.post("/v1/jobs", json={"kind": "refit", "scope": "all"}, headers=headers)
    assert created.status_code == 202
    assert created.json()["status"] == "queued"
    [job_id] = run_queued(db.settings)
    job = shop.get(f"/v1/jobs/{job_id}", headers=headers).json()
    assert job["status"] == "succeeded"
    assert job["progress"] == {"done": 40, "total": 40}
    counts = job["counts"]
    assert counts["activated"] + counts["rejected"] + counts["failed"] == 40
    reasons = {e["sku"]: e["reason"] for e in job["errors"]}
    for sku, gate in TRAPS.items():
        assert gate in reasons[sku], reasons
    assert "more" in reasons[SHORT_HISTORY]  # says how many more observations it needs
    active = active_fits(db.settings)
    assert sum(active.values()) == counts["activated"] >= 33
    assert all(n <= 1 for n in active.values())
    assert all(active[sku] == 0 for sku in (*TRAPS, SHORT_HISTORY))
    # every product not activated is explained
    assert {sku for sku, n in active.items() if n == 0} == set(reasons)


def test_incremental_refit_skips_untouched_products(
    shop: TestClient, headers: dict[str, str], db: Database
) -> None:
    shop.post("/v1/jobs", json={"kind": "refit", "scope": "all"}, headers=headers)
    run_queued(db.settings)
    shop.post("/v1/jobs", json={"kind": "refit", "scope": "all"}, headers=headers)
    [second] = run_queued(db.settings)
    job = shop.get(f"/v1/jobs/{second}", headers=headers).json()
    # only the product without any fit (too little data) is tried again
    assert job["counts"]["unchanged"] == 39 and job["counts"]["failed"] == 1

    new_week = {
        "observations": [
            {
                "period": "2026-01-05",
                "price": 9.5,
                "units": 40,
                "covariates": {"rival_price": 1.0, "promo": 0, "ad_spend": 200.0, "holiday": 0},
            }
        ]
    }
    shop.post("/v1/products/TEA-004/observations", json=new_week, headers=headers)
    shop.post("/v1/jobs", json={"kind": "refit", "scope": "all"}, headers=headers)
    [third] = run_queued(db.settings)
    job = shop.get(f"/v1/jobs/{third}", headers=headers).json()
    assert job["counts"]["unchanged"] == 38
    assert job["counts"]["activated"] + job["counts"]["rejected"] == 1

    shop.post(
        "/v1/jobs", json={"kind": "refit", "scope": "all", "refit_unchanged": True}, headers=headers
    )
    [again] = run_queued(db.settings)
    assert shop.get(f"/v1/jobs/{again}", headers=headers).json()["counts"]["unchanged"] == 0


def test_jobs_that_would_do_nothing_are_refused(shop: TestClient, headers: dict[str, str]) -> None:
    # A spec without refit_unchanged would leave every unchanged history alone and never be used;
    # a family without products has nothing to work on.
    spec_only = shop.post(
        "/v1/jobs", json={"kind": "refit", "spec": {"form": "log-log"}}, headers=headers
    )
    assert spec_only.status_code == 422 and "needs refit_unchanged" in spec_only.json()["detail"]
    # The switch's retired name is no alias: it is refused, naming the field.
    old = shop.post("/v1/jobs", json={"kind": "refit", "force": True}, headers=headers)
    assert old.status_code == 422 and [e["field"] for e in old.json()["errors"]] == ["force"]
    nobody = shop.post(
        "/v1/jobs", json={"kind": "reprice", "scope": {"family": "coffee"}}, headers=headers
    )
    assert nobody.status_code == 422
    assert nobody.json()["detail"] == "no products in family 'coffee'"


def test_scopes(shop: TestClient, headers: dict[str, str], db: Database) -> None:
    shop.post("/v1/jobs", json={"kind": "refit", "scope": {"family": "black"}}, headers=headers)
    shop.post(
        "/v1/jobs",
        json={
            "kind": "refit",
            "scope": {"skus": ["TEA-004", "NOPE-9"]},
            "spec": {"form": "log-log"},
            "refit_unchanged": True,
        },
        headers=headers,
    )
    family_job, sku_job = run_queued(db.settings)
    family = shop.get(f"/v1/jobs/{family_job}", headers=headers).json()
    assert family["progress"]["total"] == 8 and family["scope"] == {"family": "black"}
    skus = shop.get(f"/v1/jobs/{sku_job}", headers=headers).json()
    assert skus["progress"]["total"] == 2
    assert skus["counts"]["failed"] == 1
    assert {"sku": "NOPE-9", "reason": "no such product"} in skus["errors"]
    fit = shop.get("/v1/products/TEA-004/demand-model", headers=headers).json()
    assert fit["spec"]["form"] == "log-log" and fit["spec"]["covariates"] == []
    listed = shop.get("/v1/jobs", params={"limit": 1}, headers=headers).json()
    assert [j["id"] for j in listed["items"]] == [sku_job]
    assert listed["next_cursor"]


@pytest.mark.parametrize(
    "body",
    [
        {"kind": "retrain", "scope": "all"},
        {"kind": "refit", "scope": "everything"},
        {"kind": "refit", "scope": {"skus": []}},
        {"kind": "refit", "scope": {"family": "green", "skus": ["A"]}},
    ],
)
def test_bad_job_requests(shop: TestClient, headers: dict[str, str], body: object) -> None:
    response = shop.post("/v1/jobs", json=body, headers=headers)
    assert response.status_code == 422
    assert response.headers["content-type"] == "application/problem+json"


def test_the_service_worker_runs_jobs_in_the_background(
    db: Database, headers: dict[str, str]
) -> None:
    demo.load(db.settings, seed=7)
    settings = db.settings.model_copy(update={"worker_enabled": True, "worker_poll_seconds": 0.1})
    with TestClient(create_app(settings)) as client:
        job = client.post(
            "/v1/jobs", json={"kind": "refit", "scope": {"family": "oolong"}}, headers=headers
        ).json()
        deadline = time.monotonic() + 120
        while time.monotonic() < deadline:
            state = client.get(f"/v1/jobs/{job['id']}", headers=headers).json()
            if state["status"] in ("succeeded", "failed"):
                break
            time.sleep(0.2)
        assert state["status"] == "succeeded", state
        assert state["started_at"] and state["finished_at"]
        metrics = client.get("/metrics").text
        assert 'marginal_jobs_total{kind="refit",status="succeeded"}' in metrics
        assert "marginal_http_requests_total" in metrics


def _reader_processes(settings: Settings) -> list[int]:
    """Reader processes (service.estimation.history_reader) of this test's SQLite database."""
    database = sa.make_url(settings.database_url).database or "-"
    found = []
    for entry in Path("/proc").iterdir():
        try:
            words = (entry / "cmdline").read_bytes().split(b"\0")
        except OSError:
            continue
        if b"service.estimation.history_reader" in words and database.encode() in words:
            found.append(int(entry.name))
    return found


@pytest.fixture
def slow_batches(db: Database) -> Iterator[dict[str, str]]:
    env = dict(os.environ)
    env["MARGINAL_DATABASE_URL"] = db.settings.database_url
    if db.settings.database_schema:
        env["MARGINAL_DATABASE_SCHEMA"] = db.settings.database_schema
    env["MARGINAL_JOB_BATCH_SIZE"] = "1"  # one commit per product
    yield env


def test_a_killed_job_keeps_every_active_fit_and_is_failed_at_restart(
    db: Database, headers: dict[str, str], slow_batches: dict[str, str]
) -> None:
    demo.load(db.settings, seed=7)
    run_refit_cli = [sys.executable, "-m", "service.cli", "refit", "--all", "--refit-unchanged"]
    subprocess.run(
        run_refit_cli, env=slow_batches, cwd=ROOT, check=False, capture_output=True, timeout=300
    )
    before = active_fits(db.settings)
    assert sum(before.values()) >= 33

    child = subprocess.Popen(
        run_refit_cli,
        env=slow_batches,
        cwd=ROOT,
        stdout=subprocess.DEVNULL,
        stderr=subprocess.DEVNULL,
    )
    engine = make_engine(db.settings)
    deadline = time.monotonic() + 120
    done = 0
    while time.monotonic() < deadline and done < 5:
        time.sleep(0.05)
        with engine.connect() as conn:
            done = conn.execute(
                sa.text("SELECT coalesce(max(done), 0) FROM jobs WHERE status = 'running'")
            ).scalar_one()
    readers = _reader_processes(db.settings)
    child.send_signal(signal.SIGKILL)
    child.wait(timeout=30)
    assert 5 <= done < 40, "the job must be killed part of the way through"
    if db.backend == "sqlite":
        # The job's reader processes were running, and end with the job's process.
        assert readers
        deadline = time.monotonic() + 30
        while _reader_processes(db.settings) and time.monotonic() < deadline:
            time.sleep(0.05)
        assert not _reader_processes(db.settings)

    after = active_fits(db.settings)
    assert after == before  # every product still has exactly its one active fit
    with TestClient(create_app(db.settings.model_copy(update={"worker_enabled": True}))) as app:
        jobs = app.get("/v1/jobs", headers=headers).json()["items"]
    killed = jobs[0]
    assert killed["status"] == "failed"
    assert "interrupted" in killed["message"]
    assert 0 < killed["progress"]["done"] < 40
    with engine.connect() as conn:
        newer = conn.execute(
            sa.text("SELECT count(*) FROM fits WHERE job_id = :job"), {"job": killed["id"]}
        ).scalar_one()
    engine.dispose()
    assert newer >= 4  # the batches committed before the kill were kept


def test_reprice_job_recommends_once_per_active_product(
    shop: TestClient, headers: dict[str, str], db: Database
) -> None:
    shop.post("/v1/jobs", json={"kind": "refit", "scope": "all"}, headers=headers)
    run_queued(db.settings)
    active = {sku for sku, n in active_fits(db.settings).items() if n}
    created = shop.post(
        "/v1/jobs",
        json={
            "kind": "reprice",
            "scope": "all",
            "request": {"objective": "profit", "constraints": {"max_change_pct": 10}},
        },
        headers=headers,
    )
    assert created.status_code == 202
    [job_id] = run_queued(db.settings)
    job = shop.get(f"/v1/jobs/{job_id}", headers=headers).json()
    assert job["status"] == "succeeded"
    assert job["counts"]["recommended"] + job["counts"]["failed"] == len(active)
    assert job["counts"]["no_active_fit"] == 40 - len(active)
    latest = shop.get(
        "/v1/recommendations", params={"limit": 500, "state": "any"}, headers=headers
    ).json()["items"]
    assert len(latest) == job["counts"]["recommended"] >= len(active) - 2
    assert {r["sku"] for r in latest} <= active
    for item in latest:
        change = abs(item["recommended"]["price"] / item["current"]["price"] - 1)
        assert change <= 0.10 + 1e-9


@pytest.mark.parametrize(
    "body",
    [
        {"kind": "reprice", "request": {"objective": "margin"}},
        {"kind": "reprice", "request": {"constraints": {"max_change_pct": -1}}},
        {"kind": "refit", "spec": {"form": "cubic"}},
    ],
)
def test_job_options_are_checked_before_queueing(
    shop: TestClient, headers: dict[str, str], db: Database, body: dict[str, object]
) -> None:
    response = shop.post("/v1/jobs", json=body, headers=headers)
    assert response.status_code == 422
    assert row_count(db.settings, "jobs") == 0
