"""The two CSV import paths: Arrow's column-wise path for clean files and the row-by-row
path it falls back to store the same values, and every surprise falls back."""

from __future__ import annotations

import io
import json
from typing import Any

import pytest
import sqlalchemy as sa

from service.catalogue import csv_columns
from service.catalogue.ingest import import_csv
from service.catalogue.upsert_outcome import UpsertOutcome
from service.core.db import make_engine, make_session_factory, session_scope
from service.core.errors import InvalidInput
from tests.plugins.storage import Database

pytestmark = pytest.mark.storage

CLEAN = (
    "\ufeffsku,period,price,units,unit_cost,in_stock,rival_price,promo\r\n"
    "TEA-001,2024-01-01,6.49,120,2.80,true,1.02,0\r\n"
    "\r\n"
    "TEA-001,2024-01-08,5.99,150,,Yes,1.0,1\r\n"
    '"TEA-002",2024-01-01,12,40,3,,0.99,2.50\r\n'
    "TEA-002,2024-01-08,1e1,0,0,N,1e3,-0.5\r\n"
)


class _OneWay(io.RawIOBase):
    """A body that cannot seek, as a streamed upload: only the row-by-row path can read it."""

    def __init__(self, data: bytes) -> None:
        self._data = io.BytesIO(data)

    def readable(self) -> bool:
        return True

    def readinto(self, buffer: Any) -> int:
        chunk = self._data.read(len(buffer))
        buffer[: len(chunk)] = chunk
        return len(chunk)


def _import(db: Database, body: bytes, *, seekable: bool, create: bool = True) -> UpsertOutcome:
    engine = make_engine(db.settings)
    raw: Any = io.BytesIO(body) if seekable else io.BufferedReader(_OneWay(body))
    try:
        with session_scope(make_session_factory(engine, writer=True, bulk_load=True)) as s:
            return import_csv(s, raw, create_products=create, chunk_rows=20_000)
    finally:
        engine.dispose()


def _stored(db: Database) -> list[tuple[Any, ...]]:
    engine = make_engine(db.settings)
    with engine.connect() as conn:
        rows = conn.execute(
            sa.text(
                "SELECT p.sku, o.period, o.price, o.units, o.unit_cost, o.in_stock, "
                "o.covariates FROM observations o JOIN products p ON p.id = o.product_id "
                "ORDER BY p.sku, o.period"
            )
        ).all()
    engine.dispose()
    out = []
    for sku, period, price, units, cost, stock, cov in rows:
        cov = json.loads(cov) if isinstance(cov, str) else cov
        # JSON keeps "1.0" and "1" apart as text; as numbers they are the same value.
        cov = {k: float(v) for k, v in cov.items()} if cov else cov
        out.append(
            (sku, str(period), price, units, cost, None if stock is None else bool(stock), cov)
        )
    return out


@pytest.fixture
def column_path_used(monkeypatch: pytest.MonkeyPatch) -> list[bool]:
    """Records, per import, whether the column-wise path finished it."""
    used: list[bool] = []
    original = csv_columns.import_clean_csv

    def recording(*args: Any, **kwargs: Any) -> UpsertOutcome | None:
        outcome = original(*args, **kwargs)
        used.append(outcome is not None)
        return outcome

    monkeypatch.setattr(csv_columns, "import_clean_csv", recording)
    return used


def test_both_paths_store_the_same_values(db: Database, column_path_used: list[bool]) -> None:
    body = CLEAN.encode()
    by_rows = _import(db, body, seekable=False)
    stored_by_rows = _stored(db)
    db.clean()
    by_columns = _import(db, body, seekable=True)
    assert column_path_used == [True]
    assert by_columns == by_rows
    assert _stored(db) == stored_by_rows
    assert stored_by_rows[1] == (
        "TEA-001",
        "2024-01-08",
        5.99,
        150.0,
        None,
        True,
        {"promo": 1.0, "rival_price": 1.0},
    )
    assert stored_by_rows[3][5] is False and stored_by_rows[2][5] is None


def test_reimport_counts_updates_on_the_column_path(
    db: Database, column_path_used: list[bool]
) -> None:
    body = CLEAN.encode()
    first = _import(db, body, seekable=True)
    again = _import(db, body, seekable=True)
    assert column_path_used == [True, True]
    assert (first.inserted, first.updated) == (4, 0)
    assert (again.inserted, again.updated, again.products_created) == (0, 4, [])


@pytest.mark.parametrize(
    ("line", "why"),
    [
        ("TEA-003,2024-01-01,-1,5,,,1,0", "negative price"),
        ("TEA-003,2024-01-01,nan,5,,,1,0", "non-finite price"),
        ("TEA-003,2024-1-1,2,5,,,1,0", "date not in ISO form"),
        ("TEA-003,2024-01-01,2,5,,maybe,1,0", "unknown in-stock word"),
        ("TEA-003,2024-01-01,2,5,,,x,0", "non-numeric covariate"),
        ("TEA 003,2024-01-01,2,5,,,1,0", "bad sku"),
        ("TEA-001,2024-01-01,2,5,,,1,0", "repeated period"),
        ("TEA-003,2024-01-01,2,5", "short row"),
    ],
)
def test_any_surprise_falls_back_and_is_named_by_line(
    db: Database, column_path_used: list[bool], line: str, why: str
) -> None:
    body = (CLEAN + line + "\n").encode()
    with pytest.raises(InvalidInput) as refused:
        _import(db, body, seekable=True)
    assert column_path_used == [False], why
    assert any(item.line == 7 for item in refused.value.errors), (why, refused.value.errors)
    engine = make_engine(db.settings)
    with engine.connect() as conn:
        assert conn.execute(sa.text("SELECT count(*) FROM observations")).scalar_one() == 0
        assert conn.execute(sa.text("SELECT count(*) FROM products")).scalar_one() == 0
    engine.dispose()


def test_unknown_skus_fall_back_and_are_named(db: Database, column_path_used: list[bool]) -> None:
    with pytest.raises(InvalidInput) as refused:
        _import(db, CLEAN.encode(), seekable=True, create=False)
    assert column_path_used == [False]
    assert {item.column for item in refused.value.errors} == {"sku"}


def test_a_period_repeated_across_blocks_is_found(
    db: Database, column_path_used: list[bool], monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.setattr(csv_columns, "BLOCK_BYTES", 256)  # several blocks for a small file
    lines = [f"TEA-{i:03d},2024-01-01,2,5,,,1,0" for i in range(40)]
    lines.append("TEA-000,2024-01-01,3,5,,,1,0")
    header = CLEAN.splitlines()[0].lstrip("\ufeff")
    with pytest.raises(InvalidInput) as refused:
        _import(db, ("\n".join([header, *lines]) + "\n").encode(), seekable=True)
    assert column_path_used == [False]
    assert [(e.line, e.column) for e in refused.value.errors] == [(42, "period")]


def test_a_long_clean_file_is_written_block_by_block(
    db: Database, column_path_used: list[bool], monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.setattr(csv_columns, "BLOCK_BYTES", 256)
    header = CLEAN.splitlines()[0].lstrip("\ufeff")
    lines = [
        f"TEA-{i % 7:03d},2024-{1 + i // 28:02d}-{1 + i % 28:02d},2,{i},,,1,0" for i in range(196)
    ]
    outcome = _import(db, ("\n".join([header, *lines]) + "\n").encode(), seekable=True)
    assert column_path_used == [True]
    assert (outcome.rows, outcome.inserted) == (196, 196)
    assert len(outcome.products_created) == 7


@pytest.mark.parametrize(
    ("line", "why"),
    [
        ("TEA-003,2024-01-01,2,5,,,,0", "a period without one covariate"),
        (" TEA-003 , 2024-01-01 ,2,5,,,1,0", "spaces around the sku and period"),
    ],
)
def test_valid_files_the_column_path_leaves_to_the_row_path(
    db: Database, column_path_used: list[bool], line: str, why: str
) -> None:
    outcome = _import(db, (CLEAN + line + "\n").encode(), seekable=True)
    assert column_path_used == [False], why
    assert (outcome.rows, outcome.inserted) == (5, 5)
    assert ("TEA-003", "2024-01-01") in {(r[0], r[1]) for r in _stored(db)}


def test_a_quoted_cell_left_open_at_the_end_is_refused(
    db: Database, column_path_used: list[bool]
) -> None:
    # Arrow would read the open cell as closed; the upload was cut short, so refuse it.
    body = (CLEAN + 'TEA-003,2024-01-01,2,5,,,1,"0').encode()
    with pytest.raises(InvalidInput) as refused:
        _import(db, body, seekable=True)
    assert column_path_used == [False]
    assert refused.value.errors[0].line == 7
