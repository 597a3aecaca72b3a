"""Schema step 0007 on stored data: recommendations made before it become proposed (the
newest of each product) or superseded, and undoing the step keeps them."""

from __future__ import annotations

from pathlib import Path

import pytest
import sqlalchemy as sa

from service.core import migrate
from service.core.db import make_engine
from service.core.settings import Settings
from tests.plugins.storage import BACKENDS, drop_postgres_schema, new_postgres_schema


@pytest.mark.storage
@pytest.mark.parametrize("backend", BACKENDS)
def test_step_0007_gives_stored_recommendations_a_state(
    backend: str, tmp_path: Path, _postgres_status: str | None
) -> None:
    if backend == "postgresql":
        if _postgres_status:
            pytest.skip(_postgres_status)
        settings = new_postgres_schema()
    else:
        settings = Settings(database_url=f"sqlite:///{tmp_path / 'review.db'}")
    try:
        migrate.upgrade(settings, "0006")
        engine = make_engine(settings)
        with engine.begin() as conn:
            for product_id, sku in ((1, "A-1"), (2, "B-1")):
                conn.execute(
                    sa.text(
                        "INSERT INTO products (id, sku, name, currency, created_at, updated_at) "
                        "VALUES (:id, :sku, :sku, 'EUR', CURRENT_TIMESTAMP, CURRENT_TIMESTAMP)"
                    ),
                    {"id": product_id, "sku": sku},
                )
            for rec_id, product_id in ((1, 1), (2, 2), (3, 1)):
                conn.execute(
                    sa.text(
                        "INSERT INTO recommendations (id, product_id, objective, request, "
                        "result, created_at) VALUES (:id, :p, 'profit', '{}', '{}', "
                        "CURRENT_TIMESTAMP)"
                    ),
                    {"id": rec_id, "p": product_id},
                )
        migrate.upgrade(settings)
        with engine.connect() as conn:
            states = dict(
                conn.execute(sa.text("SELECT id, state FROM recommendations ORDER BY id")).all()
            )
        assert states == {1: "superseded", 2: "proposed", 3: "proposed"}
        migrate.downgrade(settings, "0006")
        with engine.connect() as conn:
            columns = {c["name"] for c in sa.inspect(conn).get_columns("recommendations")}
            count = conn.execute(sa.text("SELECT count(*) FROM recommendations")).scalar_one()
            tables = set(sa.inspect(conn).get_table_names())
        assert "state" not in columns and count == 3
        assert not {"price_entries", "audit_entries", "approval_policies"} & tables
        engine.dispose()
    finally:
        if backend == "postgresql":
            drop_postgres_schema(settings)
