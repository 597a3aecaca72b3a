"""Helpers for the reviewed path: a product with an exactly known optimum, stored
recommendations, and keys with chosen scopes.

The product's demand is our own exact line q = 1500 - 60 p with unit cost 5, so its
profit maximum is p* = (1500/60 + 5) / 2 = 15 (marginal revenue equals marginal cost on
a linear demand, a closed form: Pindyck & Rubinfeld, Microeconomics, ch. 10).
"""

from __future__ import annotations

import datetime as dt
from typing import Any

from fastapi.testclient import TestClient

from service.core.db import make_engine
from service.core.settings import Settings
from service.jobs.worker import JobRunner
from tests.plugins.storage import make_key

WEEKS = [(dt.date(2025, 1, 6) + dt.timedelta(weeks=w)).isoformat() for w in range(40)]
PROFIT_PEAK = 15.0
UNIT_COST = 5.0


def key_headers(settings: Settings, *scopes: str) -> dict[str, str]:
    return {"Authorization": f"Bearer {make_key(settings, *scopes)}"}


def linear_product(
    client: TestClient,
    headers: dict[str, str],
    sku: str,
    *,
    current: float = 14.5,
    family: str | None = None,
) -> None:
    """A product on the exact line q = 1500 - 60 p, fitted linear and active."""
    body: dict[str, Any] = {"name": sku, "unit_cost": UNIT_COST, "current_price": current}
    if family is not None:
        body["family"] = family
    assert client.put(f"/v1/products/{sku}", json=body, headers=headers).status_code in (200, 201)
    prices = [round(10 + 10 * ((7 * i) % 40) / 39, 4) for i in range(40)]
    rows = [
        {"period": w, "price": p, "units": 1500 - 60 * p}
        for w, p in zip(WEEKS, prices, strict=True)
    ]
    stored = client.post(
        f"/v1/products/{sku}/observations", json={"observations": rows}, headers=headers
    )
    assert stored.status_code == 200, stored.text
    fit = client.post(
        f"/v1/products/{sku}/fits", json={"spec": {"form": "linear"}}, headers=headers
    ).json()
    assert fit["status"] == "active", fit


def store_recommendation(
    client: TestClient, headers: dict[str, str], sku: str, **body: Any
) -> dict[str, Any]:
    response = client.post(
        f"/v1/products/{sku}/optimal-price", json={**body, "store": True}, headers=headers
    )
    assert response.status_code == 200, response.text
    return dict(response.json())


def run_queued_jobs(settings: Settings) -> list[int]:
    """Run every queued job here, the way the worker thread would."""
    engine = make_engine(settings)
    runner = JobRunner(engine, settings)
    done = []
    while (job_id := runner.claim()) is not None:
        runner.run(job_id)
        done.append(job_id)
    engine.dispose()
    return done
