"""Schema step 0008 renames stored names: fits, recommendations, jobs, their partitions and
schedules written under the older names (``own_price_positive``, ``expected_sign``,
``force``, ``skipped``, ...) read back through the API in today's names after the step, and
undoing the step restores the older names."""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest
import sqlalchemy as sa
from fastapi.testclient import TestClient

from service.catalogue import demo
from service.core import migrate
from service.core.app import create_app
from service.core.db import make_engine, make_session_factory, session_scope
from service.core.settings import Settings
from service.jobs import queue as jobs
from service.jobs.worker import JobRunner
from tests.plugins.storage import BACKENDS, drop_postgres_schema, make_key, new_postgres_schema

pytestmark = pytest.mark.storage
BEFORE = "0007"


@pytest.fixture(params=BACKENDS)
def settings(
    request: pytest.FixtureRequest, tmp_path: Path, _postgres_status: str | None
) -> Iterator[Settings]:
    if request.param == "postgresql":
        if _postgres_status:
            pytest.skip(_postgres_status)
        made = new_postgres_schema()
        try:
            yield made
        finally:
            drop_postgres_schema(made)
    else:
        yield Settings(
            database_url=f"sqlite:///{tmp_path / 'names.db'}",
            worker_enabled=False,
            scheduler_enabled=False,
        )


def _run_job(settings: Settings, kind: str, **options: Any) -> int:
    engine = make_engine(settings)
    with session_scope(make_session_factory(engine, writer=True)) as session:
        job_id = jobs.create(session, kind=kind, scope="all", **options).id
    runner = JobRunner(engine, settings)
    runner.claim(job_id)
    runner.run(job_id)
    engine.dispose()
    return job_id


def _rows(settings: Settings, query: str) -> list[Any]:
    engine = make_engine(settings)
    json_type = sa.JSON().with_variant(sa.dialects.postgresql.JSONB(), "postgresql")
    with engine.connect() as conn:
        rows = conn.execute(sa.text(query).columns(doc=json_type)).scalars().all()
    engine.dispose()
    return list(rows)


def _mark_wrong_sign_allowed(settings: Settings, recommendation_id: int) -> None:
    """Give one stored recommendation the warnings a wrong-signed fit priced anyway has."""
    engine = make_engine(settings)
    json_type = sa.JSON().with_variant(sa.dialects.postgresql.JSONB(), "postgresql")
    table = sa.table(
        "recommendations",
        sa.column("id", sa.Integer),
        sa.column("request", json_type),
        sa.column("result", json_type),
    )
    with engine.begin() as conn:
        request, result = conn.execute(
            sa.select(table.c.request, table.c.result).where(table.c.id == recommendation_id)
        ).one()
        warnings = [
            {"code": "own_price_wrong_sign_forced", "message": "priced anyway"},
            {"code": "draws_wrong_sign", "message": "some draws"},
        ]
        conn.execute(
            sa.update(table)
            .where(table.c.id == recommendation_id)
            .values(request={**request, "force": True}, result={**result, "warnings": warnings})
        )
    engine.dispose()


def _add_partitions(settings: Settings, counts: dict[int, dict[str, int]]) -> None:
    """One cluster partition per job, with the counts given (as older jobs stored them)."""
    engine = make_engine(settings)
    json_type = sa.JSON().with_variant(sa.dialects.postgresql.JSONB(), "postgresql")
    table = sa.table(
        "job_partitions",
        *(sa.column(c, sa.Integer) for c in ("job_id", "number", "first_id", "last_id")),
        *(sa.column(c, sa.Integer) for c in ("attempts", "batches_done", "done", "total")),
        sa.column("status", sa.String),
        sa.column("counts", json_type),
        sa.column("errors", json_type),
    )
    with engine.begin() as conn:
        for job_id, stored in counts.items():
            conn.execute(
                sa.insert(table).values(
                    job_id=job_id,
                    number=0,
                    first_id=1,
                    last_id=100,
                    attempts=1,
                    batches_done=1,
                    done=1,
                    total=1,
                    status="succeeded",
                    counts=stored,
                    errors=[],
                )
            )
    engine.dispose()


def test_stored_names_move_forward_and_back(settings: Settings) -> None:
    migrate.upgrade(settings)
    demo.load(settings, seed=7)
    key = make_key(settings, "read", "write", "admin")
    headers = {"Authorization": f"Bearer {key}"}
    app_settings = settings.model_copy(update={"worker_enabled": False, "scheduler_enabled": False})
    with TestClient(create_app(app_settings)) as client:
        schedule = {
            "cron": "30 2 * * *",
            "job": {"kind": "reprice", "request": {"objective": "profit"}},
        }
        put = client.put("/v1/schedules/nightly-prices", json=schedule, headers=headers)
        assert put.status_code in (200, 201), put.text
        refits = {"cron": "0 3 * * *", "job": {"kind": "refit", "refit_unchanged": True}}
        put = client.put("/v1/schedules/nightly-fits", json=refits, headers=headers)
        assert put.status_code in (200, 201), put.text
    refit_id = _run_job(settings, "refit", refit_unchanged=True)
    unchanged_id = _run_job(settings, "refit")
    reprice_id = _run_job(settings, "reprice", request={"objective": "profit"})
    [recommendation_id] = _rows(
        settings,
        "SELECT r.id AS doc FROM recommendations r JOIN products p ON p.id = r.product_id "
        "WHERE p.sku = 'TEA-004'",
    )

    migrate.downgrade(settings, BEFORE)
    _mark_wrong_sign_allowed(settings, recommendation_id)
    _add_partitions(
        settings,
        {
            unchanged_id: {"activated": 1, "rejected": 0, "failed": 0, "skipped": 4},
            reprice_id: {"recommended": 2, "failed": 0, "skipped": 3},
        },
    )
    # Undone, the stored documents speak the older names.
    [gates] = _rows(
        settings,
        "SELECT f.gates AS doc FROM fits f JOIN products p ON p.id = f.product_id "
        "WHERE p.sku = 'TEA-001'",
    )
    assert "expected_sign" in [c["name"] for c in gates["checks"]]
    [fit] = _rows(
        settings,
        "SELECT f.result AS doc FROM fits f JOIN products p ON p.id = f.product_id "
        "WHERE p.sku = 'TEA-001'",
    )
    assert "own_price_positive" in [w["code"] for w in fit["warnings"]]
    counts = dict(
        zip(
            (refit_id, unchanged_id, reprice_id),
            _rows(settings, "SELECT counts AS doc FROM jobs ORDER BY id"),
            strict=True,
        )
    )
    assert counts[unchanged_id]["skipped"] == 39  # all but the product too short to fit
    assert "unchanged" not in counts[unchanged_id] and "no_active_fit" not in counts[reprice_id]
    unfitted = counts[reprice_id]["skipped"]
    assert unfitted >= 3  # the two traps and the short history have no active fit
    [options, *_] = _rows(settings, "SELECT options AS doc FROM jobs ORDER BY id")
    assert options["force"] is True and "refit_unchanged" not in options
    errors = _rows(settings, f"SELECT errors AS doc FROM jobs WHERE id = {reprice_id}")[0]
    assert "skipped: no active fit" in [e["reason"] for e in errors]
    refit_errors = _rows(settings, f"SELECT errors AS doc FROM jobs WHERE id = {refit_id}")[0]
    assert any(e["reason"].endswith("expected_sign") for e in refit_errors)
    templates = _rows(settings, "SELECT job AS doc FROM schedules ORDER BY name")
    assert templates[0]["force"] is True

    migrate.upgrade(settings)
    with TestClient(create_app(app_settings)) as client:
        fits = client.get("/v1/products/TEA-001/fits", headers=headers).json()["items"]
        [listed_fit] = fits
        path = f"/v1/products/TEA-001/fits/{listed_fit['id']}"
        rejected = client.get(path, headers=headers).json()
        assert [c["name"] for c in rejected["gates"]["checks"] if not c["passed"]] == ["wrong_sign"]
        assert "wrong_sign" in [w["code"] for w in rejected["warnings"]]
        refit = client.get(f"/v1/jobs/{refit_id}", headers=headers).json()
        assert refit["refit_unchanged"] is True
        assert any(e["reason"].endswith(": wrong_sign") for e in refit["errors"])
        unchanged = client.get(f"/v1/jobs/{unchanged_id}", headers=headers).json()
        assert unchanged["counts"]["unchanged"] == 39 and unchanged["refit_unchanged"] is False
        reprice = client.get(f"/v1/jobs/{reprice_id}", headers=headers).json()
        assert reprice["counts"]["no_active_fit"] == unfitted
        assert reprice["counts"]["unchanged"] == 0
        assert "no active fit" in [e["reason"] for e in reprice["errors"]]
        listed = client.get("/v1/schedules", headers=headers)
        assert listed.status_code == 200, listed.text
        by_name = {s["name"]: s["job"] for s in listed.json()["items"]}
        assert by_name["nightly-fits"]["refit_unchanged"] is True
        params = {"limit": 500, "state": "any"}
        listed = client.get("/v1/recommendations", params=params, headers=headers)
        [recommendation] = [r for r in listed.json()["items"] if r["sku"] == "TEA-004"]
        assert [w["code"] for w in recommendation["warnings"]] == [
            "wrong_sign_allowed",
            "wrong_sign_draws",
        ]
    partitions = dict(
        zip(
            (unchanged_id, reprice_id),
            _rows(settings, "SELECT counts AS doc FROM job_partitions ORDER BY job_id"),
            strict=True,
        )
    )
    assert partitions[unchanged_id] == {"activated": 1, "rejected": 0, "failed": 0, "unchanged": 4}
    assert partitions[reprice_id] == {"recommended": 2, "failed": 0, "no_active_fit": 3}
    [request] = _rows(
        settings, f"SELECT request AS doc FROM recommendations WHERE id = {recommendation_id}"
    )
    assert request["allow_wrong_sign"] is True and "force" not in request

    # Undone once more, each count is skipped again, whichever kind of job it came from.
    migrate.downgrade(settings, BEFORE)
    back = _rows(settings, "SELECT counts AS doc FROM job_partitions ORDER BY job_id")
    assert [c["skipped"] for c in back] == [4, 3]
    assert not any({"unchanged", "no_active_fit"} & set(c) for c in back)
