"""Database errors as clients and operators see them (#13 items 2 and 9), on SQLite and
PostgreSQL.

Promises: README "Errors" (503 when the database cannot be reached; a full disk is said
to be a full disk, not an unreachable database; nothing stored) and "Secrets stay secret"
(statement values, such as a key's secret hash, never reach a log).
"""

from __future__ import annotations

import logging
import sqlite3
from collections.abc import Iterator
from contextlib import contextmanager
from typing import Any

import psycopg.errors
import pytest
from fastapi.testclient import TestClient
from sqlalchemy import event
from sqlalchemy.exc import OperationalError

from tests.plugins.storage import Database, row_count

pytestmark = pytest.mark.storage


def _sqlite_full() -> BaseException:
    return sqlite3.OperationalError("database or disk is full")


def _postgres_full() -> BaseException:
    return psycopg.errors.DiskFull(
        'could not extend file "base/16384/16385": No space left on device'
    )


@contextmanager
def _commits_fail_with(client: TestClient, cause: BaseException) -> Iterator[None]:
    def full(_session: Any) -> None:
        raise OperationalError("COMMIT", {}, cause)

    factory = client.app.state.write_sessions  # type: ignore[attr-defined]
    event.listen(factory, "before_commit", full)
    try:
        yield
    finally:
        event.remove(factory, "before_commit", full)


@pytest.mark.parametrize("cause", [_sqlite_full, _postgres_full], ids=["sqlite", "postgresql"])
def test_a_full_disk_is_answered_as_such(
    client: TestClient,
    headers: dict[str, str],
    db: Database,
    caplog: pytest.LogCaptureFixture,
    cause: Any,
) -> None:
    # Item 9: SQLite's "database or disk is full" and PostgreSQL's DiskFull (SQLSTATE
    # 53100) were answered "the database cannot be reached".
    with _commits_fail_with(client, cause()), caplog.at_level(logging.WARNING):
        answer = client.put("/v1/products/TEA-FULL", json={"name": "Full tin"}, headers=headers)
    assert answer.status_code == 503, answer.text
    body = answer.json()
    assert body["type"].endswith("/storage-full"), body
    assert "storage is full" in body["detail"] and "cannot be reached" not in body["detail"]
    assert answer.headers["retry-after"]
    assert row_count(db.settings, "products") == 0
    logged = [r for r in caplog.records if "storage is full" in r.getMessage()]
    assert logged and logged[0].levelno == logging.ERROR
    assert type(cause()).__name__ in logged[0].getMessage()  # the cause, named


def test_a_lost_database_is_still_unreachable(
    client: TestClient, headers: dict[str, str], db: Database
) -> None:
    # The other outages keep their answer.
    lost = ConnectionError("server closed the connection unexpectedly")
    with _commits_fail_with(client, lost):
        answer = client.put("/v1/products/TEA-GONE", json={"name": "Gone"}, headers=headers)
    assert answer.status_code == 503
    assert answer.json()["type"].endswith("/database-unavailable")


def test_a_failing_statement_never_logs_its_values(
    client: TestClient, headers: dict[str, str], db: Database, caplog: pytest.LogCaptureFixture
) -> None:
    # Item 4: statement parameters are hidden (hide_parameters). Creating a key inserts
    # its secret's hash; the insert is sent to a table that does not exist, so the
    # database refuses it with the hash among the statement's values.
    seen: list[Any] = []

    def misdirect(
        _conn: Any, _cursor: Any, statement: str, parameters: Any, _context: Any, _many: bool
    ) -> tuple[str, Any]:
        if statement.lstrip().upper().startswith("INSERT INTO API_KEYS"):
            seen.append(parameters)
            statement = statement.replace("api_keys", "api_keys_missing", 1)
        return statement, parameters

    engine = client.app.state.engine  # type: ignore[attr-defined]
    event.listen(engine, "before_cursor_execute", misdirect, retval=True)
    try:
        with caplog.at_level(logging.DEBUG):
            answer = client.post(
                "/v1/api-keys", json={"name": "night batch", "scopes": ["read"]}, headers=headers
            )
    finally:
        event.remove(engine, "before_cursor_execute", misdirect)
    assert answer.status_code in (500, 503), answer.text
    assert seen, "the insert of the key was not attempted"
    values = seen[0].values() if isinstance(seen[0], dict) else seen[0]
    secret_hash = next(v for v in values if isinstance(v, str) and len(v) == 64)
    assert caplog.records, "the failure was not logged"
    for record in caplog.records:
        text = repr(vars(record)) + record.getMessage()
        if record.exc_info:
            text += logging.Formatter().formatException(record.exc_info)
        assert secret_hash not in text, record
        assert "night batch" not in text, record
    assert secret_hash not in answer.text
