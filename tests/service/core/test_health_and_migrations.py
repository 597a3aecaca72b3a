"""Probes, the migration chain up and down on both databases, and the OpenAPI file."""

from __future__ import annotations

from pathlib import Path

import pytest
import sqlalchemy as sa
from fastapi.testclient import TestClient

from service.cli import OPENAPI_PATH, openapi_document
from service.core import migrate
from service.core.app import create_app
from service.core.db import make_engine
from service.core.settings import Settings
from service.core.tables import Base
from tests.plugins.storage import (
    BACKENDS,
    drop_postgres_schema,
    new_postgres_schema,
)


@pytest.mark.storage
def test_health_and_ready(client: TestClient) -> None:
    assert client.get("/healthz").json() == {"status": "ok"}
    ready = client.get("/readyz")
    assert ready.status_code == 200
    assert ready.json()["status"] == "ready"
    assert ready.json()["schema_step"] == ready.json()["latest_step"]


def test_not_ready_without_schema(tmp_path: Path) -> None:
    settings = Settings(database_url=f"sqlite:///{tmp_path / 'empty.db'}")
    with TestClient(create_app(settings)) as client:
        response = client.get("/readyz")
    assert response.status_code == 503
    assert response.json()["status"] == "not ready"
    assert response.json()["database"] == "reachable"


def test_not_ready_when_database_unreachable() -> None:
    settings = Settings(database_url="postgresql+psycopg://nobody@127.0.0.1:1/none")
    with TestClient(create_app(settings)) as client:
        response = client.get("/readyz")
        assert response.status_code == 503
        assert response.json()["database"] == "unreachable"
        assert client.get("/healthz").status_code == 200


def _tables(settings: Settings) -> set[str]:
    engine = make_engine(settings)
    names = set(sa.inspect(engine).get_table_names(schema=settings.database_schema))
    engine.dispose()
    return names - {"alembic_version"}


@pytest.mark.storage
@pytest.mark.parametrize("backend", BACKENDS)
def test_migrations_up_down_up(backend: str, tmp_path: Path, _postgres_status: str | None) -> None:
    if backend == "postgresql":
        if _postgres_status:
            pytest.skip(_postgres_status)
        settings = new_postgres_schema()
    else:
        settings = Settings(database_url=f"sqlite:///{tmp_path / 'chain.db'}")
    try:
        migrate.upgrade(settings)
        assert _tables(settings) == set(Base.metadata.tables)
        engine = make_engine(settings)
        assert migrate.current_revision(engine) == migrate.head_revision(settings)
        engine.dispose()
        migrate.downgrade(settings, "base")
        assert _tables(settings) == set()
        migrate.upgrade(settings)
        assert _tables(settings) == set(Base.metadata.tables)
    finally:
        if backend == "postgresql":
            drop_postgres_schema(settings)


def test_schema_from_migrations_matches_tables(tmp_path: Path) -> None:
    # The migrations are the schema; the table classes must describe the same thing.
    from alembic.autogenerate import compare_metadata
    from alembic.runtime.migration import MigrationContext

    settings = Settings(database_url=f"sqlite:///{tmp_path / 'compare.db'}")
    migrate.upgrade(settings)
    engine = make_engine(settings)
    with engine.connect() as conn:
        diff = compare_metadata(MigrationContext.configure(conn), Base.metadata)
    engine.dispose()
    assert diff == []


def test_openapi_file_is_current() -> None:
    assert OPENAPI_PATH.read_text() == openapi_document(), "run `marginal openapi`"


def test_every_operation_is_documented() -> None:
    import json

    document = json.loads(openapi_document())
    for path, item in document["paths"].items():
        for method, operation in item.items():
            assert operation.get("summary"), (method, path)
            assert operation.get("operationId"), (method, path)
            if path.startswith("/v1/"):
                codes = set(operation["responses"])
                assert {"401", "403"} <= codes, (method, path)
                assert "application/problem+json" in operation["responses"]["401"]["content"]
