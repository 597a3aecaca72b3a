"""A product's sales history: batch upsert and ranged reads."""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Query

from service.catalogue import ingest, observations
from service.catalogue.deps import ReadProduct, WriteProduct
from service.catalogue.schemas import (
    ObservationBatch,
    ObservationOut,
    UpsertCounts,
    observation_out,
)
from service.core.deps import READ, WRITE, ReadSession, WriteSession
from service.core.pagination import cursor_date, decode_cursor, encode_cursor
from service.core.responses import problems
from service.core.schemas import DateText, Page

router = APIRouter(prefix="/v1/products/{sku}/observations", tags=["observations"])


@router.post(
    "",
    response_model=UpsertCounts,
    dependencies=[WRITE],
    operation_id="upsert_observations",
    summary="Insert or replace periods of a product's history",
    responses=problems(404, 413, 422),
)
def upsert_observations(
    product: WriteProduct, body: ObservationBatch, session: WriteSession
) -> UpsertCounts:
    """Keyed on period: a period sent again replaces the stored one. All rows or none."""
    outcome = ingest.upsert_batch(session, product_id=product.id, observations=body.observations)
    return UpsertCounts(rows=outcome.rows, inserted=outcome.inserted, updated=outcome.updated)


@router.get(
    "",
    response_model=Page[ObservationOut],
    dependencies=[READ],
    operation_id="list_observations",
    summary="Read a product's history, oldest first",
    responses=problems(404, 422),
)
def list_observations(
    product: ReadProduct,
    session: ReadSession,
    start: Annotated[DateText | None, Query(description="First period to include")] = None,
    end: Annotated[DateText | None, Query(description="Last period to include")] = None,
    limit: Annotated[int, Query(ge=1, le=5000)] = 1000,
    cursor: Annotated[
        str | None, Query(description="From `next_cursor` of the previous page")
    ] = None,
) -> Page[ObservationOut]:
    position = decode_cursor(cursor)
    after = cursor_date(position, "after")
    rows, more = observations.list_range(
        session, product_id=product.id, start=start, end=end, limit=limit, after=after
    )
    next_cursor = encode_cursor({"after": rows[-1].period.isoformat()}) if more and rows else None
    items = [observation_out(r) for r in rows]
    if rows:
        tests = observations.price_test_marks(
            session, product_id=product.id, first=rows[0].period, last=rows[-1].period
        )
        for i, row in enumerate(rows):
            mark = next((t for t, a, b in tests if a <= row.period <= b), None)
            if mark is not None:
                items[i] = items[i].model_copy(update={"price_test_id": mark})
    return Page[ObservationOut](items=items, next_cursor=next_cursor)
