"""Writing fit records: the one place a new fit is stored, gated and activated.

A single fit (the API) and a batch of a refit job go through :func:`activate` alike:
the product's active fit and latest version are read in bulk, each new fit passes the
quality gates or is rejected, the fits it replaces are superseded and the new records
inserted, all in the caller's transaction. How records are inserted is the database's
concern: :class:`FitRecordWriter` has one implementation per dialect.
"""

from __future__ import annotations

import datetime as dt
import functools
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any, Literal, Protocol

from sqlalchemy import Connection, Text, column, func, insert, select, table, update
from sqlalchemy.orm import Session

from models import DemandFit, FitFailure, ModelSpec
from service.core import json_text
from service.core.settings import Settings
from service.core.tables import FitRow, ProductRow, utcnow
from service.estimation.fit_review import AWAITING_REVIEW, HOLDOUT_GATE, holdout_undecided
from service.estimation.gates import ACTIVE, REJECTED, SUPERSEDED, GateResult, quality_gates

Outcome = Literal["activated", "rejected", "awaiting_review", "failed"]


@dataclass(frozen=True)
class FitTarget:
    """The product a new fit belongs to."""

    product_id: int
    sku: str


@dataclass(frozen=True)
class FitOutcome:
    """What became of one product's new fit: activated, rejected by the gates (with
    their names), awaiting a person's review (the gates did not decide), or failed
    before a record could be made (with the reason)."""

    sku: str
    outcome: Outcome
    version: int | None = None
    reason: str = ""


def row_values(
    *,
    product_id: int,
    version: int,
    fit: DemandFit,
    gates: list[GateResult],
    job_id: int | None = None,
    result_json: str | None = None,
    undecided: Sequence[str] = (),
) -> dict[str, Any]:
    """The columns of a new fit record, JSON columns as text; active only if every gate
    passed and decided (``undecided`` names the gates that left it to a person).
    ``result_json`` is the fit's :func:`encode_result` when the caller has it."""
    passed = all(g.passed for g in gates)
    gates_record: dict[str, Any] = {"passed": passed, "checks": [g.to_dict() for g in gates]}
    if undecided:
        gates_record["undecided"] = list(undecided)
    return {
        "product_id": product_id,
        "version": version,
        "status": (AWAITING_REVIEW if undecided else ACTIVE) if passed else REJECTED,
        "form": fit.form,
        "spec": _spec_json(fit.spec),
        "result": result_json if result_json is not None else encode_result(fit),
        "gates": json_text.dumps(gates_record),
        "n_obs": fit.quality.n_obs,
        "holdout_wape": fit.quality.holdout_wape,
        "own_price_estimate": fit.own_price.estimate,
        "job_id": job_id,
        "window_start": _date(fit.window.first_period),
        "window_end": _date(fit.window.last_period),
        "created_at": utcnow(),
    }


def encode_result(fit: DemandFit) -> str:
    """A fit's record as the text of its ``result`` column (the costly part of a record),
    as the ORM would write it (the engine encodes JSON columns with the same function)."""
    return json_text.dumps(fit.to_dict())


@functools.lru_cache(maxsize=64)
def _spec_json(spec: ModelSpec) -> str:
    """A spec's JSON text: every record of a batch shares its spec, so it is encoded once."""
    return json_text.dumps(spec.to_dict())


def _date(text: str | None) -> dt.date | None:
    return dt.date.fromisoformat(text) if text else None


# -- inserting records, per database ---------------------------------------------------


class FitRecordWriter(Protocol):
    def insert(self, conn: Connection, rows: Sequence[dict[str, Any]]) -> None:
        """Insert new fit records (:func:`row_values`) in the connection's transaction."""


# The columns of row_values, in the order the writers write them.
_COLUMNS = tuple(c.name for c in FitRow.__table__.columns if c.name != "id")
_JSON_COLUMNS = frozenset({"spec", "result", "gates"})
# Fit records as SQLite takes them: the JSON columns arrive as text already encoded (as
# the JSON type would encode them), the other columns keep their types.
_TEXT_JSON_FITS = table(
    "fits",
    *(
        column(c.name, Text() if c.name in _JSON_COLUMNS else c.type)
        for c in FitRow.__table__.columns
        if c.name != "id"
    ),
)


class SqliteFitRecords:
    """One executemany of the records."""

    def insert(self, conn: Connection, rows: Sequence[dict[str, Any]]) -> None:
        conn.execute(insert(_TEXT_JSON_FITS), list(rows))


class PostgresFitRecords:
    """One COPY of the records (an INSERT per record costs a round trip and a statement)."""

    def insert(self, conn: Connection, rows: Sequence[dict[str, Any]]) -> None:
        driver: Any = conn.connection.driver_connection
        with (
            driver.cursor() as cursor,
            cursor.copy(f"COPY fits ({', '.join(_COLUMNS)}) FROM STDIN") as copy,
        ):
            for row in rows:
                copy.write_row([row[name] for name in _COLUMNS])


def record_writer(dialect: str) -> FitRecordWriter:
    return PostgresFitRecords() if dialect == "postgresql" else SqliteFitRecords()


def insert_rows(session: Session, rows: Sequence[dict[str, Any]]) -> None:
    """Insert new fit records in bulk, in the session's transaction."""
    if rows:
        conn = session.connection()
        record_writer(conn.dialect.name).insert(conn, rows)


# -- activation ------------------------------------------------------------------------


def activate(
    session: Session,
    *,
    targets: Sequence[FitTarget],
    results: Sequence[DemandFit | FitFailure],
    settings: Settings,
    texts: Sequence[str | None] | None = None,
    job_id: int | None = None,
) -> list[FitOutcome]:
    """Store new fits of distinct products; activate those that pass the gates and
    supersede the fits they replace, in the session's transaction.

    ``texts`` are the fits' :func:`encode_result`, when the caller made them already.
    """
    ids = [t.product_id for t in targets]
    if session.get_bind().dialect.name == "postgresql":
        # Two jobs over the same products take turns, product by product: each locks its
        # batch's products (in id order, so neither waits on the other in a cycle) before
        # reading their active fits, and holds them until its activations are committed.
        # (SQLite runs one writing transaction at a time anyway.)
        session.execute(
            select(ProductRow.id)
            .where(ProductRow.id.in_(ids))
            .order_by(ProductRow.id)
            .with_for_update()
        )
    active = {
        r.product_id: (r.id, r.holdout_wape, r.spec)
        for r in session.execute(
            select(FitRow.product_id, FitRow.id, FitRow.holdout_wape, FitRow.spec).where(
                FitRow.product_id.in_(ids), FitRow.status == ACTIVE
            )
        )
    }
    versions = dict(
        session.execute(
            select(FitRow.product_id, func.max(FitRow.version))
            .where(FitRow.product_id.in_(ids))
            .group_by(FitRow.product_id)
        ).all()
    )
    texts = texts if texts is not None else [None] * len(targets)
    new_rows: list[dict[str, Any]] = []
    superseded: list[int] = []
    outcomes: list[FitOutcome] = []
    for target, result, text in zip(targets, results, texts, strict=True):
        if isinstance(result, FitFailure):
            reason = result.reason.removeprefix(f"{target.sku}: ")
            outcomes.append(FitOutcome(target.sku, "failed", reason=reason))
            continue
        previous = active.get(target.product_id)
        gates = quality_gates(result, previous[1] if previous else None, settings)
        version = (versions.get(target.product_id) or 0) + 1
        held = holdout_undecided(
            result.spec.to_dict(),
            previous[2] if previous else None,
            sku=target.sku,
        )
        undecided: list[str] = []
        if held is not None:
            gates = [held if g.name == HOLDOUT_GATE else g for g in gates]
            undecided = [HOLDOUT_GATE]
        if all(g.passed for g in gates) and undecided:
            reason = (
                "the hold-out gate did not decide (the spec identifies the price effect "
                "differently from the active fit's): a person must review the fit and "
                "activate it"
            )
            outcomes.append(FitOutcome(target.sku, AWAITING_REVIEW, version, reason))
        elif all(g.passed for g in gates):
            outcomes.append(FitOutcome(target.sku, "activated", version))
            if previous:
                superseded.append(previous[0])
        else:
            failed = ", ".join(g.name for g in gates if not g.passed)
            reason = f"rejected by the quality gates: {failed}"
            outcomes.append(FitOutcome(target.sku, "rejected", version, reason))
        new_rows.append(
            row_values(
                product_id=target.product_id,
                version=version,
                fit=result,
                gates=gates,
                job_id=job_id,
                result_json=text,
                undecided=undecided,
            )
        )
    if superseded:
        session.execute(update(FitRow).where(FitRow.id.in_(superseded)).values(status=SUPERSEDED))
    insert_rows(session, new_rows)
    return outcomes
