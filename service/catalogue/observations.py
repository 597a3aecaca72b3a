"""Observation storage: the bulk upsert used by every ingest path, and history reads.

Writes go through the raw driver inside the session's transaction: the ORM costs
about 20x more per row, and an import is mostly rows. Each backend gets its fastest
correct upsert: SQLite ``executemany`` with ``ON CONFLICT``; PostgreSQL ``COPY`` into a
staging table, then one ``INSERT .. SELECT .. ON CONFLICT`` that reports inserts.
"""

from __future__ import annotations

import datetime as dt
import io
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pyarrow as pa
import pyarrow.csv as pacsv
from sqlalchemy import func, select, update
from sqlalchemy.orm import Session

from service.core.tables import ObservationRow, PriceTestRow, ProductRow, utcnow

# (product_id, period ISO date, price, units, unit_cost, in_stock, covariates JSON text)
ObservationTuple = tuple[int, str, float, float, float | None, bool | None, str | None]

_COLUMNS = "product_id, period, price, units, unit_cost, in_stock, covariates"
_UPDATE = (
    "price = excluded.price, units = excluded.units, unit_cost = excluded.unit_cost, "
    "in_stock = excluded.in_stock, covariates = excluded.covariates"
)


@dataclass(frozen=True)
class ObservationColumns:
    """A block of checked observations, column by column (see service.catalogue.csv_columns)."""

    product_id: np.ndarray
    period: pa.Array  # ISO dates as text
    price: np.ndarray
    units: np.ndarray
    unit_cost: list[float | None]
    in_stock: list[bool | None]
    covariates: pa.Array | None  # JSON text, or None when the file has no covariates

    def tuples(self) -> list[ObservationTuple]:
        n = len(self.period)
        covariates = self.covariates.to_pylist() if self.covariates is not None else [None] * n
        return list(
            zip(
                self.product_id.tolist(),
                self.period.to_pylist(),
                self.price.tolist(),
                self.units.tolist(),
                self.unit_cost,
                self.in_stock,
                covariates,
                strict=True,
            )
        )

    def csv(self) -> bytes:
        """The block as CSV text for ``COPY .. (FORMAT csv)``: empty unquoted cells are NULL."""
        n = len(self.period)
        table = pa.table(
            {
                "product_id": pa.array(self.product_id, pa.int64()),
                "period": self.period,
                "price": pa.array(self.price, pa.float64()),
                "units": pa.array(self.units, pa.float64()),
                "unit_cost": pa.array(self.unit_cost, pa.float64()),
                "in_stock": pa.array(self.in_stock, pa.bool_()),
                "covariates": self.covariates
                if self.covariates is not None
                else pa.nulls(n, pa.string()),
            }
        )
        out = io.BytesIO()
        pacsv.write_csv(table, out, pacsv.WriteOptions(include_header=False))
        return out.getvalue()


class _Writer:
    """What both databases' writers share: counting rows and marking changed products."""

    def __init__(self, session: Session) -> None:
        self._conn = session.connection()
        self._driver: Any = self._conn.connection.driver_connection
        assert self._driver is not None
        self.rows = 0

    def _mark_changed(self, product_ids: set[int]) -> None:
        """Record that these products' histories changed (incremental refits read it)."""
        ids = sorted(product_ids)
        now = utcnow()
        for start in range(0, len(ids), 500):
            self._conn.execute(
                update(ProductRow)
                .where(ProductRow.id.in_(ids[start : start + 500]))
                .values(history_changed_at=now)
            )


class SqliteObservationWriter(_Writer):
    """``executemany`` with ``ON CONFLICT``. The transaction holds the write lock from
    BEGIN IMMEDIATE, so the change in the table's row count is exactly the number of new
    periods."""

    def __init__(self, session: Session) -> None:
        super().__init__(session)
        self._count_before = self._table_count()

    def _table_count(self) -> int:
        cur = self._driver.cursor()
        try:
            cur.execute("SELECT count(*) FROM observations")
            return int(cur.fetchone()[0])
        finally:
            cur.close()

    def write(self, rows: Sequence[ObservationTuple]) -> None:
        if not rows:
            return
        self.rows += len(rows)
        self._mark_changed({row[0] for row in rows})
        self._driver.executemany(
            f"INSERT INTO observations ({_COLUMNS}) VALUES (?, ?, ?, ?, ?, ?, ?) "
            f"ON CONFLICT (product_id, period) DO UPDATE SET {_UPDATE}",
            rows,
        )

    def write_columns(self, block: ObservationColumns) -> None:
        """Like :meth:`write`, for a block checked column by column."""
        if len(block.period):
            self.write(block.tuples())  # executemany binds tuples

    def finish(self) -> tuple[int, int]:
        """(inserted, updated) for everything written so far."""
        inserted = self._table_count() - self._count_before
        return inserted, self.rows - inserted


class PostgresObservationWriter(_Writer):
    """``COPY`` into a staging table, then one ``INSERT .. SELECT .. ON CONFLICT`` that
    reports inserts. A transaction-scoped advisory lock makes observation writers queue."""

    def __init__(self, session: Session) -> None:
        super().__init__(session)
        self._inserted = 0
        with self._driver.cursor() as cur:
            # Observation writers queue, as SQLite's BEGIN IMMEDIATE makes them do:
            # chunked upserts of overlapping periods taken in different orders would
            # deadlock, and imports creating the same new sku would collide. The lock
            # is per schema and ends with the transaction.
            cur.execute(
                "SELECT pg_advisory_xact_lock(hashtext(current_schema()), "
                "hashtext('marginal.observations'))"
            )
            cur.execute(
                "CREATE TEMP TABLE IF NOT EXISTS observation_stage ("
                "product_id integer, period date, price double precision, "
                "units double precision, unit_cost double precision, in_stock boolean, "
                "covariates jsonb) ON COMMIT DELETE ROWS"
            )

    def write(self, rows: Sequence[ObservationTuple]) -> None:
        if not rows:
            return
        self.rows += len(rows)
        self._mark_changed({row[0] for row in rows})
        with self._driver.cursor() as cur:
            with cur.copy(f"COPY observation_stage ({_COLUMNS}) FROM STDIN") as copy:
                for row in rows:
                    copy.write_row(row)
            self._upsert_stage(cur)

    def write_columns(self, block: ObservationColumns) -> None:
        """Like :meth:`write`, for a block checked column by column."""
        if not len(block.period):
            return
        self.rows += len(block.period)
        self._mark_changed(set(np.unique(block.product_id).tolist()))
        with self._driver.cursor() as cur:
            # One CSV text a block: no Python work per row on the way to the server.
            with cur.copy(f"COPY observation_stage ({_COLUMNS}) FROM STDIN (FORMAT csv)") as copy:
                copy.write(block.csv())
            self._upsert_stage(cur)

    def _upsert_stage(self, cur: Any) -> None:
        cur.execute(
            f"WITH upserted AS (INSERT INTO observations ({_COLUMNS}) "
            f"SELECT {_COLUMNS} FROM observation_stage "
            f"ON CONFLICT (product_id, period) DO UPDATE SET {_UPDATE} "
            "RETURNING (xmax = 0) AS was_inserted) "
            "SELECT count(*) FILTER (WHERE was_inserted) FROM upserted"
        )
        self._inserted += int(cur.fetchone()[0])
        cur.execute("TRUNCATE observation_stage")

    def finish(self) -> tuple[int, int]:
        """(inserted, updated) for everything written so far."""
        return self._inserted, self.rows - self._inserted


ObservationWriter = SqliteObservationWriter | PostgresObservationWriter


def observation_writer(session: Session) -> ObservationWriter:
    """Upserts observations in chunks within the session's transaction and counts
    outcomes, the fastest correct way for the session's database."""
    if session.connection().dialect.name == "postgresql":
        return PostgresObservationWriter(session)
    return SqliteObservationWriter(session)


def list_all(session: Session, *, product_id: int) -> list[ObservationRow]:
    """A product's whole history, oldest first."""
    return list(
        session.scalars(
            select(ObservationRow)
            .where(ObservationRow.product_id == product_id)
            .order_by(ObservationRow.period)
        )
    )


def list_range(
    session: Session,
    *,
    product_id: int,
    start: dt.date | None,
    end: dt.date | None,
    limit: int,
    after: dt.date | None,
) -> tuple[list[ObservationRow], bool]:
    """One page of a product's history, oldest first, and whether more rows follow."""
    query = (
        select(ObservationRow)
        .where(ObservationRow.product_id == product_id)
        .order_by(ObservationRow.period)
        .limit(limit + 1)
    )
    if start is not None:
        query = query.where(ObservationRow.period >= start)
    if end is not None:
        query = query.where(ObservationRow.period <= end)
    if after is not None:
        query = query.where(ObservationRow.period > after)
    rows = list(session.scalars(query))
    return rows[:limit], len(rows) > limit


def count_for(session: Session, *, product_id: int) -> int:
    return int(
        session.scalar(
            select(func.count())
            .select_from(ObservationRow)
            .where(ObservationRow.product_id == product_id)
        )
        or 0
    )


def price_test_marks(
    session: Session, *, product_id: int, first: dt.date, last: dt.date
) -> list[tuple[int, dt.date, dt.date]]:
    """The product's stored price tests that overlap ``first`` to ``last``: (id, first
    period, last period); an observation within one's periods is its test period."""
    rows = session.execute(
        select(PriceTestRow.id, PriceTestRow.first_period, PriceTestRow.last_period).where(
            PriceTestRow.product_id == product_id,
            PriceTestRow.first_period <= last,
            PriceTestRow.last_period >= first,
        )
    )
    return [(r.id, r.first_period, r.last_period) for r in rows]
