"""Storage fixtures: every storage test runs on SQLite and on PostgreSQL.

PostgreSQL is taken from MARGINAL_TEST_POSTGRES_URL (default: the local server's `test`
database). Each test session works in a schema of its own, created by the migrations
and dropped at the end. Without a reachable server the PostgreSQL variants skip, unless
MARGINAL_REQUIRE_POSTGRES=1 (as in CI), where they fail.

Fixtures: ``database`` (a migrated database per backend, for the session), ``db`` (the
same, emptied for the test), ``client`` (the app on ``db``) and ``headers`` (a key with
every scope). Helpers: ``Database``, ``make_key``, ``row_count``, ``new_postgres_schema``
and ``drop_postgres_schema``.
"""

from __future__ import annotations

import os
import re
import uuid
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path

import pytest
import sqlalchemy as sa
from fastapi.testclient import TestClient

from service.access import auth
from service.core import migrate
from service.core.app import create_app
from service.core.db import make_engine, make_session_factory, session_scope
from service.core.settings import Settings
from service.core.tables import Base

POSTGRES_URL = os.environ.get(
    "MARGINAL_TEST_POSTGRES_URL", "postgresql+psycopg://postgres@127.0.0.1:5432/test"
)
REQUIRE_POSTGRES = os.environ.get("MARGINAL_REQUIRE_POSTGRES") == "1"
BACKENDS = os.environ.get("MARGINAL_TEST_BACKENDS", "sqlite,postgresql").split(",")


def postgres_reachable() -> str | None:
    """None when reachable, else the reason."""
    try:
        engine = sa.create_engine(POSTGRES_URL, connect_args={"connect_timeout": 3})
        with engine.connect() as conn:
            conn.execute(sa.text("select 1"))
        engine.dispose()
        return None
    except Exception as exc:  # any driver or network failure means "not reachable"
        return f"PostgreSQL at {POSTGRES_URL} is not reachable: {type(exc).__name__}"


@dataclass
class Database:
    backend: str
    settings: Settings

    def clean(self) -> None:
        engine = make_engine(self.settings)
        names = [t.name for t in reversed(Base.metadata.sorted_tables)]
        with engine.begin() as conn:
            if self.backend == "postgresql":
                conn.execute(sa.text(f"TRUNCATE {', '.join(names)} RESTART IDENTITY CASCADE"))
            else:
                # Append-only tables refuse DELETE on SQLite too: their triggers step aside
                # for the emptying and come back as they were.
                guards = conn.execute(
                    sa.text(
                        "SELECT name, sql FROM sqlite_master "
                        "WHERE type = 'trigger' AND name LIKE '%\\_no\\_delete' ESCAPE '\\'"
                    )
                ).all()
                for name, _ in guards:
                    conn.execute(sa.text(f"DROP TRIGGER {name}"))
                for name in names:
                    conn.execute(sa.text(f"DELETE FROM {name}"))
                for _, sql in guards:
                    conn.execute(sa.text(sql))
        engine.dispose()


def _new_sqlite(tmp: Path) -> Settings:
    return Settings(database_url=f"sqlite:///{tmp / 'marginal-test.db'}")


def new_postgres_schema() -> Settings:
    schema = f"marginal_test_{uuid.uuid4().hex[:10]}"
    engine = sa.create_engine(POSTGRES_URL)
    with engine.begin() as conn:
        conn.execute(sa.text(f"CREATE SCHEMA {schema}"))
    engine.dispose()
    return Settings(database_url=POSTGRES_URL, database_schema=schema)


def drop_postgres_schema(settings: Settings) -> None:
    engine = sa.create_engine(POSTGRES_URL)
    with engine.begin() as conn:
        conn.execute(sa.text(f"DROP SCHEMA IF EXISTS {settings.database_schema} CASCADE"))
    engine.dispose()


@pytest.fixture(scope="session")
def _postgres_status() -> str | None:
    reason = postgres_reachable()
    if reason and REQUIRE_POSTGRES:
        pytest.fail(f"{reason} (MARGINAL_REQUIRE_POSTGRES=1)")
    return reason


@pytest.fixture(scope="session", params=BACKENDS)
def database(
    request: pytest.FixtureRequest,
    tmp_path_factory: pytest.TempPathFactory,
    _postgres_status: str | None,
) -> Iterator[Database]:
    """A migrated database per backend, shared by the session and cleaned per test."""
    backend = request.param
    if backend == "postgresql":
        if _postgres_status:
            pytest.skip(_postgres_status)
        settings = new_postgres_schema()
    else:
        settings = _new_sqlite(tmp_path_factory.mktemp("sqlite"))
    migrate.upgrade(settings)
    yield Database(backend=backend, settings=settings)
    if backend == "postgresql":
        drop_postgres_schema(settings)


@pytest.fixture
def db(database: Database) -> Database:
    database.clean()
    return database


@pytest.fixture
def client(db: Database) -> Iterator[TestClient]:
    app = create_app(db.settings)
    with TestClient(app, raise_server_exceptions=False) as test_client:
        yield test_client


def make_key(settings: Settings, *scopes: str, name: str = "test") -> str:
    engine = make_engine(settings)
    with session_scope(make_session_factory(engine, writer=True)) as session:
        secret = auth.create_key(session, name=name, scopes=list(scopes)).secret
    engine.dispose()
    return secret


@pytest.fixture
def headers(db: Database) -> dict[str, str]:
    """Authorization for a key with every scope."""
    return {"Authorization": f"Bearer {make_key(db.settings, 'read', 'write', 'admin')}"}


def row_count(settings: Settings, table: str) -> int:
    engine = make_engine(settings)
    with engine.connect() as conn:
        count = int(conn.execute(sa.text(f"SELECT count(*) FROM {table}")).scalar_one())
    engine.dispose()
    return count


def pytest_terminal_summary(terminalreporter: pytest.TerminalReporter) -> None:
    """Say how many storage tests ran on each database, so a skipped backend is visible."""
    counts: dict[str, dict[str, int]] = {b: {} for b in ("sqlite", "postgresql")}
    for outcome in ("passed", "failed", "skipped", "error"):
        for report in terminalreporter.stats.get(outcome, []):
            if getattr(report, "when", "call") != "call" and outcome != "skipped":
                continue
            for backend in counts:
                if re.search(rf"[\[-]{backend}[\]-]", getattr(report, "nodeid", "")):
                    counts[backend][outcome] = counts[backend].get(outcome, 0) + 1
    terminalreporter.section("storage backends")
    for backend, by_outcome in counts.items():
        summary = ", ".join(f"{n} {o}" for o, n in sorted(by_outcome.items())) or "none ran"
        terminalreporter.write_line(f"storage tests on {backend}: {summary}")
