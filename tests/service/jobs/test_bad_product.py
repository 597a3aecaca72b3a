"""A bad product never stops a job: the refit and reprice jobs and `marginal report`
record a product that cannot be read, fitted or drawn as failed, with its reason, and
go on with the others.

The bad product's stored covariate is made unreadable behind the API's back (a text
where a number belongs), as an older version or a hand edit of the database could leave
it. The shop is three invented tea products with a known linear demand.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import pytest
import sqlalchemy as sa
from fastapi.testclient import TestClient

from service.core.db import make_engine, make_session_factory, session_scope
from service.core.tables import JobRow
from service.jobs import queue as jobs
from service.jobs.worker import JobRunner
from service.ui.report import write_report
from tests.plugins.storage import Database

pytestmark = pytest.mark.storage

SKUS = ("TEA-GOOD-1", "TEA-BAD", "TEA-GOOD-2")
SPEC = {"form": "linear", "covariates": ["rival_price"]}


def _shop(client: TestClient, headers: dict[str, str]) -> None:
    for sku in SKUS:
        body = {
            "name": f"Tea {sku}",
            "family": "green",
            "unit_cost": 2.0,
            "current_price": 6.0,
            "default_spec": SPEC,
        }
        assert client.put(f"/v1/products/{sku}", json=body, headers=headers).status_code in (
            200,
            201,
        )
    lines = ["sku,period,price,units,unit_cost,rival_price"]
    for sku in SKUS:
        for week in range(30):
            price = 5.0 + (week * 7 % 11) / 5
            rival = 6.0 + (week * 3 % 5) / 10
            units = 200 - 20 * price + 5 * rival + (week % 3)
            period = f"2025-{1 + week // 4:02d}-{1 + (week % 4) * 7:02d}"
            lines.append(f"{sku},{period},{price:.2f},{units:.1f},2.0,{rival:.2f}")
    answer = client.post(
        "/v1/imports",
        content="\n".join(lines) + "\n",
        headers={**headers, "content-type": "text/csv"},
    )
    assert answer.status_code == 200, answer.json()


def _poison(db: Database) -> None:
    """TEA-BAD's covariate becomes text in the stored documents."""
    bad = json.dumps({"rival_price": "not a number"})
    engine = make_engine(db.settings)
    value = "CAST(:doc AS jsonb)" if db.backend == "postgresql" else ":doc"
    with engine.begin() as conn:
        conn.execute(
            sa.text(
                f"UPDATE observations SET covariates = {value} WHERE product_id = "
                "(SELECT id FROM products WHERE sku = 'TEA-BAD')"
            ),
            {"doc": bad},
        )
    engine.dispose()


def _corrupt_fit(db: Database, sku: str) -> None:
    """The product's stored fit record loses its content (a hand edit, a bad restore)."""
    engine = make_engine(db.settings)
    value = "CAST(:doc AS jsonb)" if db.backend == "postgresql" else ":doc"
    with engine.begin() as conn:
        conn.execute(
            sa.text(
                f"UPDATE fits SET result = {value} WHERE product_id = "
                "(SELECT id FROM products WHERE sku = :sku)"
            ),
            {"doc": json.dumps({"sku": sku}), "sku": sku},
        )
    engine.dispose()


def _run_job(db: Database, kind: str, **options: Any) -> tuple[str, JobRow]:
    engine = make_engine(db.settings)
    with session_scope(make_session_factory(engine, writer=True)) as session:
        job_id = jobs.create(session, kind=kind, scope="all", **options).id
    runner = JobRunner(engine, db.settings)
    runner.claim(job_id)
    status = runner.run(job_id)
    with session_scope(make_session_factory(engine, writer=False)) as session:
        job = jobs.get_or_raise(session, job_id=job_id)
        session.expunge(job)
    engine.dispose()
    return status, job


def _reasons(job: JobRow) -> dict[str, str]:
    return {e["sku"]: e["reason"] for e in job.errors or []}


def test_a_product_that_cannot_be_read_fails_alone_in_refit_reprice_and_report(
    client: TestClient, headers: dict[str, str], db: Database, tmp_path: Path
) -> None:
    _shop(client, headers)
    _poison(db)

    status, job = _run_job(db, "refit", refit_unchanged=True)
    assert job.counts is not None
    assert job.counts["activated"] + job.counts["rejected"] == 2, (job.counts, job.errors)
    assert job.counts["failed"] == 1
    assert job.done == job.total == 3
    assert "cannot be read" in _reasons(job)["TEA-BAD"]
    assert status == jobs.SUCCEEDED, job.message
    # The reason names no statement and no stored value.
    assert "SELECT" not in _reasons(job)["TEA-BAD"]

    _corrupt_fit(db, "TEA-GOOD-2")
    status, job = _run_job(db, "reprice", request={"objective": "profit"})
    assert job.counts is not None
    assert job.counts["recommended"] == 1, (job.counts, job.errors)
    assert job.counts["failed"] == 1 and "TEA-GOOD-2" in _reasons(job)
    assert job.counts["no_active_fit"] == 1 and "TEA-BAD" in _reasons(job)

    # The emptied record has served its purpose; the report shows that product unfitted.
    engine = make_engine(db.settings)
    with engine.begin() as conn:
        conn.execute(
            sa.text(
                "DELETE FROM recommendations WHERE product_id = "
                "(SELECT id FROM products WHERE sku = 'TEA-GOOD-2')"
            )
        )
        conn.execute(
            sa.text(
                "DELETE FROM fits WHERE product_id = "
                "(SELECT id FROM products WHERE sku = 'TEA-GOOD-2')"
            )
        )
    engine.dispose()
    out = tmp_path / "site"
    summary = write_report(db.settings, out)
    assert set(summary.failed) == {"TEA-BAD"}, summary.failed
    assert summary.products == 3
    # The folder is whole: every product has its page, the good one its charts too.
    for sku in SKUS:
        assert (out / f"product-{sku}.html").is_file()
    assert "page not made" in (out / "product-TEA-BAD.html").read_text()
    assert len(list((out / "charts").glob("TEA-GOOD-1*"))) == 3
