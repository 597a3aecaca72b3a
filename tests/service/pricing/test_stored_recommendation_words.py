"""Recommendations stored before migration 0005 (in an optimiser's words) read back, in
today's words, through the API after the upgrade; and the downgrade restores them."""

from __future__ import annotations

import datetime as dt
from pathlib import Path

import pytest
import sqlalchemy as sa
from fastapi.testclient import TestClient

from service.catalogue import demo
from service.core import migrate
from service.core.app import create_app
from service.core.db import make_engine
from service.core.settings import Settings
from tests.plugins.storage import BACKENDS, drop_postgres_schema, make_key, new_postgres_schema

OLD_WORDS = {
    "method": "grid",
    "success": True,
    "status": 1,
    "message": "Optimum on a constraint: max_change_pct. Best of 41 allowed prices (price_step).",
    "nit": 41,
}


def _old_result() -> dict[str, object]:
    return {
        "sku": "TEA-004",
        "form": "log-log",
        "objective": "profit",
        "unit_cost": 6.0,
        "current": None,
        "recommended": {
            "price": 18.5,
            "units": 120.0,
            "revenue": 2220.0,
            "profit": 1500.0,
            "margin_pct": 67.6,
        },
        "change_pct": None,
        "unconstrained_price": 21.0,
        "binding_constraints": ["max_change_pct"],
        "feasible_range": {"low": 12.0, "high": 24.0},
        "uncertainty": None,
        "warnings": [],
        "curve": None,
        "scenario": {},
        **OLD_WORDS,
    }


@pytest.mark.storage
@pytest.mark.parametrize("backend", BACKENDS)
def test_old_recommendations_read_back_in_new_words(
    backend: str, tmp_path: Path, _postgres_status: str | None
) -> None:
    if backend == "postgresql":
        if _postgres_status:
            pytest.skip(_postgres_status)
        settings = new_postgres_schema()
    else:
        settings = Settings(database_url=f"sqlite:///{tmp_path / 'words.db'}")
    try:
        migrate.upgrade(settings, "0004")
        demo.load(settings, seed=7)
        engine = make_engine(settings)
        json_type = sa.JSON().with_variant(sa.dialects.postgresql.JSONB(), "postgresql")
        table = sa.table(
            "recommendations",
            sa.column("product_id", sa.Integer),
            sa.column("fit_id", sa.Integer),
            sa.column("objective", sa.String),
            sa.column("request", json_type),
            sa.column("result", json_type),
            sa.column("created_at", sa.DateTime(timezone=True)),
        )
        with engine.begin() as conn:
            product_id = conn.scalar(sa.text("SELECT id FROM products WHERE sku = 'TEA-004'"))
            conn.execute(
                sa.insert(table).values(
                    product_id=product_id,
                    fit_id=None,
                    objective="profit",
                    request={},
                    result=_old_result(),
                    created_at=dt.datetime.now(dt.UTC),
                )
            )
        migrate.upgrade(settings)
        key = make_key(settings, "read")
        with TestClient(create_app(settings)) as client:
            page = client.get(
                "/v1/recommendations",
                params={"state": "proposed"},
                headers={"Authorization": f"Bearer {key}"},
            )
        assert page.status_code == 200, page.text
        [item] = page.json()["items"]
        assert not set(OLD_WORDS) & set(item)
        assert item["optimum"] == "held_by_constraint"
        assert item["search"] == "allowed_prices"
        assert item["search_steps"] == 41
        assert item["summary"].startswith("Optimum held by a constraint: max_change_pct.")

        migrate.downgrade(settings, "0004")
        with engine.connect() as conn:
            restored = conn.scalar(sa.select(table.c.result))
        assert {k: restored[k] for k in OLD_WORDS} == OLD_WORDS
        engine.dispose()
    finally:
        if backend == "postgresql":
            drop_postgres_schema(settings)
