"""Cron expressions a schedule cannot run on are refused with 422 (#13 item 5), on SQLite
and PostgreSQL.

Promise: the OpenAPI description of `PUT /v1/schedules/{name}` ("five-field cron
expression; one that never fires is refused") and README "Errors" (422 with `errors`,
nothing stored, never a 5xx).
"""

from __future__ import annotations

import pytest
from fastapi.testclient import TestClient

from tests.plugins.storage import Database, row_count

pytestmark = pytest.mark.storage
NIGHTLY = {"cron": "30 2 * * *", "timezone": "UTC", "job": {"kind": "refit", "scope": "all"}}


@pytest.mark.parametrize(
    ("cron", "words"),
    [
        ("0 0 31 2 *", "never fires"),
        ("0 0 30 2 *", "never fires"),
        ("0 0 31 4,6,9,11 *", "never fires"),
        ("0 0 * * * * *", "has 7 fields"),
        ("0 0 * * * *", "has 6 fields"),
        ("0 0 1 1 * 2020", "has 6 fields"),
    ],
)
def test_a_cron_that_cannot_run_is_refused(
    client: TestClient, headers: dict[str, str], db: Database, cron: str, words: str
) -> None:
    # Item 5: croniter accepted these and the schedule answered 500 (or ran every second).
    answer = client.put("/v1/schedules/odd", json={**NIGHTLY, "cron": cron}, headers=headers)
    assert answer.status_code == 422, answer.text
    [error] = answer.json()["errors"]
    assert error["field"] == "cron" and words in error["message"], error
    assert row_count(db.settings, "schedules") == 0


@pytest.mark.parametrize("cron", ["0 0 29 2 *", "0 0 L 2 *", "15 3 1-7 * 1"])
def test_rare_but_real_crons_are_kept(
    client: TestClient, headers: dict[str, str], db: Database, cron: str
) -> None:
    # Leap days and last days come round: such a schedule is stored with its next run.
    answer = client.put("/v1/schedules/rare", json={**NIGHTLY, "cron": cron}, headers=headers)
    assert answer.status_code == 201, answer.text
    assert answer.json()["next_run_at"] is not None
    assert client.get("/v1/schedules/rare", headers=headers).status_code == 200


@pytest.mark.parametrize("flag", [0, 1, "true", None])
def test_switches_are_true_or_false_only(
    client: TestClient, headers: dict[str, str], db: Database, flag: object
) -> None:
    # Found by scripts/fuzz: a 0 for this switch was taken as false, against the boolean.
    job = client.post("/v1/jobs", json={"kind": "refit", "refit_unchanged": flag}, headers=headers)
    assert job.status_code == 422, job.text
    assert job.json()["errors"][0]["field"] == "refit_unchanged"
    schedule = client.put("/v1/schedules/flag", json={**NIGHTLY, "enabled": flag}, headers=headers)
    assert schedule.status_code == 422, schedule.text
    assert row_count(db.settings, "jobs") == 0 and row_count(db.settings, "schedules") == 0
