"""CSV import of observations for many products at once."""

from __future__ import annotations

import tempfile
from typing import Annotated

from fastapi import APIRouter, Query, Request
from starlette.concurrency import run_in_threadpool

from service.catalogue import ingest
from service.catalogue.schemas import ImportResult
from service.catalogue.upsert_outcome import UpsertOutcome
from service.core.db import session_scope
from service.core.deps import WRITE, BulkSessions, SettingsDep
from service.core.errors import UnsupportedMediaType
from service.core.responses import problems

router = APIRouter(prefix="/v1/imports", tags=["observations"])

CSV_EXAMPLE = (
    "sku,period,price,units,unit_cost,in_stock,rival_price,promo\n"
    "TEA-001,2024-01-01,6.49,120,2.80,true,1.02,0\n"
)


@router.post(
    "",
    response_model=ImportResult,
    dependencies=[WRITE],
    operation_id="import_observations",
    summary="Import observations from CSV (all rows or none)",
    responses=problems(413, 415, 422),
    openapi_extra={
        "requestBody": {
            "required": True,
            "content": {"text/csv": {"schema": {"type": "string"}, "example": CSV_EXAMPLE}},
        }
    },
)
async def import_observations(
    request: Request,
    settings: SettingsDep,
    bulk: BulkSessions,
    create_products: Annotated[
        bool, Query(description="Create products for skus not yet in the catalogue")
    ] = False,
) -> ImportResult:
    """Columns `sku, period, price, units`; optional `unit_cost, in_stock`; every other
    column is a numeric covariate named by its header (an empty cell means no value).
    A UTF-8 byte-order mark and CRLF line ends are accepted. Rows are keyed on
    (sku, period): a period sent again replaces the stored one."""
    media_type = request.headers.get("content-type", "").split(";")[0].strip().lower()
    if media_type != "text/csv":
        raise UnsupportedMediaType(
            f"send the file as text/csv (got {media_type or 'no content type'})"
        )
    # Spool to a temporary file (memory first, disk past 1 MiB) so the import reads
    # a bounded stream while the body limit middleware counts bytes.
    with tempfile.SpooledTemporaryFile(max_size=1_048_576) as spool:
        async for chunk in request.stream():
            spool.write(chunk)
        spool.seek(0)

        def run() -> UpsertOutcome:
            with session_scope(bulk) as session:
                return ingest.import_csv(
                    session,
                    spool,
                    create_products=create_products,
                    chunk_rows=settings.import_chunk_rows,
                )

        outcome = await run_in_threadpool(run)
    return ImportResult(
        rows=outcome.rows,
        inserted=outcome.inserted,
        updated=outcome.updated,
        products_created=outcome.products_created,
    )
