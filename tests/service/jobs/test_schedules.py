"""Cron schedules: the API, the missed-run rule, and exactly one job per slot."""

from __future__ import annotations

import datetime as dt
import threading
from zoneinfo import ZoneInfo

import pytest
import sqlalchemy as sa
from fastapi.testclient import TestClient

from service.core.db import make_engine, make_session_factory
from service.core.settings import Settings
from service.jobs import schedules
from tests.plugins.storage import Database, make_key, row_count

pytestmark = pytest.mark.storage
NIGHTLY = {
    "cron": "30 2 * * *",
    "timezone": "Europe/Berlin",
    "job": {"kind": "refit", "scope": {"family": "green"}},
    "enabled": True,
}


def test_schedule_api(client: TestClient, headers: dict[str, str]) -> None:
    created = client.put("/v1/schedules/nightly-refit", json=NIGHTLY, headers=headers)
    assert created.status_code == 201, created.json()
    body = created.json()
    assert body["job"]["scope"] == {"family": "green"}
    next_run = dt.datetime.fromisoformat(body["next_run_at"])
    assert next_run.astimezone(ZoneInfo("Europe/Berlin")).hour == 2
    assert body["last_run_at"] is None
    replaced = client.put(
        "/v1/schedules/nightly-refit", json={**NIGHTLY, "enabled": False}, headers=headers
    )
    assert replaced.status_code == 200 and replaced.json()["next_run_at"] is None
    assert [s["name"] for s in client.get("/v1/schedules", headers=headers).json()["items"]] == [
        "nightly-refit"
    ]
    assert client.get("/v1/schedules/nightly-refit", headers=headers).status_code == 200
    assert client.delete("/v1/schedules/nightly-refit", headers=headers).status_code == 204
    assert client.get("/v1/schedules/nightly-refit", headers=headers).status_code == 404


@pytest.mark.parametrize(
    ("change", "field"),
    [
        ({"cron": "61 2 * * *"}, "cron"),
        ({"cron": "every night"}, "cron"),
        ({"timezone": "Mars/Olympus"}, "timezone"),
        ({"job": {"kind": "refit", "scope": "some"}}, "job.scope"),
    ],
)
def test_bad_schedules(
    client: TestClient, headers: dict[str, str], db: Database, change: dict[str, object], field: str
) -> None:
    response = client.put("/v1/schedules/bad", json={**NIGHTLY, **change}, headers=headers)
    assert response.status_code == 422
    assert any(e["field"].startswith(field) for e in response.json()["errors"]), response.json()
    assert row_count(db.settings, "schedules") == 0


def test_schedules_need_admin(client: TestClient, db: Database) -> None:
    writer = {"Authorization": f"Bearer {make_key(db.settings, 'read', 'write')}"}
    assert client.put("/v1/schedules/x", json=NIGHTLY, headers=writer).status_code == 403


def _writes(settings: Settings) -> tuple[sa.Engine, object]:
    engine = make_engine(settings)
    return engine, make_session_factory(engine, writer=True)


def _put_every_minute(
    client: TestClient, headers: dict[str, str], db: Database, changed_at: dt.datetime
) -> None:
    every_minute = {**NIGHTLY, "cron": "* * * * *", "timezone": "UTC"}
    client.put("/v1/schedules/minutely", json=every_minute, headers=headers)
    engine = make_engine(db.settings)
    with engine.begin() as conn:  # as if the schedule had been set up a while ago
        conn.execute(sa.text("UPDATE schedules SET updated_at = :t"), {"t": changed_at})
    engine.dispose()


def test_missed_slots_run_once_at_start(
    client: TestClient, headers: dict[str, str], db: Database
) -> None:
    now = dt.datetime(2026, 11, 30, 12, 0, 30, tzinfo=dt.UTC)
    _put_every_minute(client, headers, db, changed_at=now - dt.timedelta(minutes=10))
    engine, writes = _writes(db.settings)
    # ten slots passed while nothing ran: one catch-up job, for the latest slot only
    assert len(schedules.tick(writes, now=now)) == 1  # type: ignore[arg-type]
    assert schedules.tick(writes, now=now + dt.timedelta(seconds=20)) == []  # type: ignore[arg-type]
    assert len(schedules.tick(writes, now=now + dt.timedelta(minutes=1))) == 1  # type: ignore[arg-type]
    engine.dispose()
    runs = client.get("/v1/schedules/minutely", headers=headers).json()
    assert runs["last_run_at"].startswith("2026-11-30T12:01:00")
    jobs = client.get("/v1/jobs", headers=headers).json()["items"]
    assert [j["schedule"] for j in jobs] == ["minutely", "minutely"]
    assert all(j["status"] == "queued" for j in jobs)


def test_slots_before_the_schedule_existed_never_run(
    client: TestClient, headers: dict[str, str], db: Database
) -> None:
    now = dt.datetime(2026, 11, 30, 12, 0, 30, tzinfo=dt.UTC)
    _put_every_minute(client, headers, db, changed_at=now + dt.timedelta(seconds=5))
    engine, writes = _writes(db.settings)
    assert schedules.tick(writes, now=now) == []  # type: ignore[arg-type]
    engine.dispose()


def test_two_schedulers_start_each_slot_exactly_once(
    client: TestClient, headers: dict[str, str], db: Database
) -> None:
    start = dt.datetime(2026, 11, 30, 12, 0, 30, tzinfo=dt.UTC)
    _put_every_minute(client, headers, db, changed_at=start - dt.timedelta(minutes=1))
    replicas = [_writes(db.settings) for _ in range(2)]
    created: list[list[int]] = [[], []]
    slots = 15

    def replica(index: int, barrier: threading.Barrier) -> None:
        _, writes = replicas[index]
        for minute in range(slots):
            barrier.wait()  # both replicas tick the same slot at the same moment
            now = start + dt.timedelta(minutes=minute)
            created[index] += schedules.tick(writes, now=now)  # type: ignore[arg-type]

    barrier = threading.Barrier(2)
    threads = [threading.Thread(target=replica, args=(i, barrier)) for i in range(2)]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join(120)
    for engine, _ in replicas:
        engine.dispose()
    assert len(created[0]) + len(created[1]) == slots
    assert len(set(created[0]) | set(created[1])) == slots
    assert row_count(db.settings, "jobs") == slots
    assert row_count(db.settings, "schedule_runs") == slots
