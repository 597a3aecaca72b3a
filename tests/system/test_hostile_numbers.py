"""Hostile numbers through the whole HTTP API: never a 500, never NaN or Infinity in JSON.

Histories with huge or tiny magnitudes, constant prices, collinear or constant
covariates, all-zero units, one or two periods and exact fits go through storage, every
form of fit, the active model, elasticities, prediction, recommended prices (one product
and a whole family) and refit and reprice jobs. Each request ends in a problem+json that
says what is wrong (4xx) or in an answer whose numbers are all finite (an undefined
figure is null), with a warning where the data is degenerate.
"""

from __future__ import annotations

import datetime as dt
import math
import re
from dataclasses import dataclass, field
from typing import Any

import pytest
from fastapi.testclient import TestClient
from httpx import Response

from service.core.db import make_engine
from service.jobs.worker import JobRunner
from tests.plugins.live_server import strict_json
from tests.plugins.storage import Database

pytestmark = pytest.mark.storage

FORMS = ("log-log", "linear", "semi-log", "poisson", "auto")
N = 40  # periods of a scenario unless it says otherwise
WIGGLE = [1.0, 1.05, 0.95, 1.1, 0.9, 1.15, 0.85, 1.2]  # a price path that varies
SHORTFALL = re.compile(r"(\d+) usable observations, the model needs at least (\d+)")
NOISE = [1.0, 1.04, 0.97, 1.02, 0.95, 1.05, 0.99, 1.01, 0.96, 1.03]


def periods(n: int) -> list[str]:
    start = dt.date(2024, 1, 1)
    return [(start + dt.timedelta(weeks=k)).isoformat() for k in range(n)]


def demand(price: float, base: float) -> float:
    return base / math.pow(price, 1.5)


@dataclass(frozen=True)
class Scenario:
    name: str
    price: list[float]
    units: list[float]
    covariates: dict[str, list[float]] = field(default_factory=dict)
    # A fit that succeeds must carry one of these warnings (empty: a clean fit is fine).
    expect_warning: frozenset[str] = frozenset()
    # Every fit must be refused (4xx) with a detail saying this.
    expect_refusal: str | None = None


def scaled(scale: float, unit_scale: float = 1.0) -> tuple[list[float], list[float]]:
    relative = [WIGGLE[k % 8] for k in range(N)]
    units = [demand(p, 100.0) * NOISE[k % 10] * unit_scale for k, p in enumerate(relative)]
    return [p * scale for p in relative], units


def scenario_list() -> list[Scenario]:
    plain_price, plain_units = scaled(5.0)
    promo = [float(k % 3 == 0) for k in range(N)]
    out = [
        Scenario("huge-prices", *scaled(1e300)),
        Scenario("tiny-prices", *scaled(1e-300)),
        Scenario(
            "mixed-price-magnitudes",
            [1e-300 if k % 2 else 1e300 * WIGGLE[k % 8] for k in range(N)],
            plain_units,
        ),
        Scenario("huge-units", *scaled(5.0, 1e300)),
        Scenario("tiny-units", *scaled(5.0, 1e-300)),
        Scenario("subnormal-prices", [5e-324 * (1 + k % 4) for k in range(N)], plain_units),
        Scenario(
            "constant-price",
            [5.0] * N,
            plain_units,
            expect_warning=frozenset({"low_price_variation", "terms_dropped"}),
        ),
        Scenario(
            "collinear-covariates",
            plain_price,
            plain_units,
            {"promo": promo, "promo_twice": [2 * v for v in promo]},
            expect_warning=frozenset({"terms_dropped", "high_vif"}),
        ),
        Scenario(
            "constant-covariate",
            plain_price,
            plain_units,
            {"shelf": [3.0] * N},
            expect_warning=frozenset({"terms_dropped"}),
        ),
        Scenario(
            "huge-covariate",
            plain_price,
            plain_units,
            {"ad_spend": [1e300 * WIGGLE[(k + 3) % 8] for k in range(N)]},
        ),
        Scenario(
            "all-zero-units",
            plain_price,
            [0.0] * N,
            expect_warning=frozenset({"zero_units_dropped", "own_price_not_significant"}),
        ),
        Scenario(
            "constant-units",
            plain_price,
            [50.0] * N,
            expect_warning=frozenset({"own_price_not_significant"}),
        ),
        Scenario("exact-fit", plain_price, [demand(p, 100.0) for p in plain_price]),
        Scenario("one-period", [5.0], [10.0], expect_refusal="more"),
        Scenario("two-periods", [5.0, 6.0], [10.0, 8.0], expect_refusal="more"),
    ]
    return out


SCENARIOS = scenario_list()


def observations(s: Scenario) -> list[dict[str, Any]]:
    return [
        {
            "period": day,
            "price": s.price[k],
            "units": s.units[k],
            "covariates": {name: values[k] for name, values in s.covariates.items()},
        }
        for k, day in enumerate(periods(len(s.price)))
    ]


def checked(response: Response) -> Any:
    """The parsed body of an answer that is no server error and holds no NaN or Infinity."""
    assert response.status_code < 500, response.text[:800]
    body = strict_json(response.text)
    if response.status_code >= 400:
        assert response.headers["content-type"] == "application/problem+json", response.text
        assert body["detail"], body
        # "Not enough data" must be true: fewer usable observations than needed.
        if found := SHORTFALL.search(body["detail"]):
            usable, needed = map(int, found.groups())
            assert usable < needed, body["detail"]
    return body


def exercise_fit(
    client: TestClient, headers: dict[str, str], s: Scenario, sku: str, form: str
) -> None:
    spec = {"form": form, "covariates": sorted(s.covariates), "seasonality": "none"}
    response = client.post(f"/v1/products/{sku}/fits", json={"spec": spec}, headers=headers)
    fit = checked(response)
    if s.expect_refusal is not None:
        assert 400 <= response.status_code < 500, fit
        assert s.expect_refusal in fit["detail"], fit
        return
    if response.status_code != 201:
        assert response.status_code in (409, 422), fit
        return
    codes = {w["code"] for w in fit["warnings"]}
    if s.expect_warning:
        assert codes & s.expect_warning, (form, codes)
    if fit["status"] != "active":
        # A rejected fit is stored with its reasons; the model endpoints need an active one.
        assert not fit["gates"]["passed"]
        return
    low, high = min(s.price), max(s.price)
    base = f"/v1/products/{sku}"
    checked(client.get(f"{base}/demand-model", headers=headers))
    for at in ("latest", "price:1e999", "price:0"):
        checked(client.get(f"{base}/elasticities", params={"at": at}, headers=headers))
    for price in (high, 1e308):
        checked(
            client.post(f"{base}/predict", json={"price": price, "unit_cost": 0.0}, headers=headers)
        )
    requests: list[dict[str, Any]] = [
        {"objective": "revenue", "uncertainty_draws": 10, "curve_points": 50},
        {"objective": "profit", "unit_cost": low / 2, "allow_wrong_sign": True},
        {
            "objective": "profit",
            "unit_cost": high,
            "constraints": {"allow_extrapolation": True, "max_price": 1e308},
            "allow_wrong_sign": True,
        },
    ]
    for body in requests:
        checked(client.post(f"{base}/optimal-price", json=body, headers=headers))


@pytest.mark.parametrize("scenario", SCENARIOS, ids=[s.name for s in SCENARIOS])
def test_hostile_history_never_breaks_the_api(
    client: TestClient, headers: dict[str, str], scenario: Scenario
) -> None:
    sku = f"HN-{scenario.name}"
    put = client.put(f"/v1/products/{sku}", json={"name": scenario.name}, headers=headers)
    assert put.status_code == 201, put.text
    stored = client.post(
        f"/v1/products/{sku}/observations",
        json={"observations": observations(scenario)},
        headers=headers,
    )
    assert stored.status_code == 200, stored.text
    # The history comes back exactly as sent, whatever its magnitude.
    page = checked(client.get(f"/v1/products/{sku}/observations", headers=headers))
    assert [o["price"] for o in page["items"]] == scenario.price
    assert [o["units"] for o in page["items"]] == scenario.units
    for form in FORMS:
        exercise_fit(client, headers, scenario, sku, form)


def csv_lines(s: Scenario, sku: str) -> list[str]:
    names = ["promo", "promo_twice", "shelf", "ad_spend"]
    lines = []
    for o in observations(s):
        cells = [repr(o["covariates"][n]) if n in o["covariates"] else "" for n in names]
        lines.append(f"{sku},{o['period']},{o['price']!r},{o['units']!r}," + ",".join(cells))
    return lines


def test_refit_and_reprice_jobs_over_hostile_histories(
    client: TestClient, headers: dict[str, str], db: Database
) -> None:
    header = "sku,period,price,units,promo,promo_twice,shelf,ad_spend"
    lines = [line for s in SCENARIOS for line in csv_lines(s, f"HN-{s.name}")]
    imported = client.post(
        "/v1/imports",
        params={"create_products": "true"},
        content="\n".join([header, *lines]) + "\n",
        headers={**headers, "content-type": "text/csv"},
    )
    assert imported.status_code == 200, imported.text[:500]
    jobs: list[dict[str, Any]] = [
        {"kind": "refit", "scope": "all", "refit_unchanged": True, "spec": {"form": form}}
        for form in FORMS
    ]
    # After the refits, the active fits are of every form that passed somewhere.
    jobs.append({"kind": "reprice", "scope": "all", "request": {"objective": "revenue"}})
    for job in jobs:
        created = client.post("/v1/jobs", json=job, headers=headers)
        assert created.status_code == 202, created.text
        run_queued(db)
        done = checked(client.get(f"/v1/jobs/{created.json()['id']}", headers=headers))
        # One product the numbers defeat is that product's failure, never the job's.
        assert done["status"] == "succeeded", done
        assert done["progress"]["done"] == done["progress"]["total"] == len(SCENARIOS)
        explained = {e["sku"] for e in done["errors"]}
        assert done["counts"]["failed"] <= len(explained)
    for s in SCENARIOS:
        sku = f"HN-{s.name}"
        checked(client.get(f"/v1/products/{sku}/demand-model", headers=headers))
        joined = {"family": "hostile", "unit_cost": min(s.price) / 2}
        assert client.patch(f"/v1/products/{sku}", json=joined, headers=headers).status_code == 200
    checked(client.get("/v1/recommendations", headers=headers))
    # Joint prices over every active hostile fit at once.
    for objective in ("revenue", "profit"):
        body = {"objective": objective, "uncertainty_draws": 5}
        joint = client.post("/v1/families/hostile/optimal-prices", json=body, headers=headers)
        checked(joint)


def run_queued(db: Database) -> None:
    engine = make_engine(db.settings)
    runner = JobRunner(engine, db.settings)
    while (job_id := runner.claim()) is not None:
        runner.run(job_id)
    engine.dispose()
