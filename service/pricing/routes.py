"""Recommended prices: one product, a whole family, and the latest ones for back ends."""

from __future__ import annotations

from typing import Annotated, Any, Literal

from fastapi import APIRouter, Path, Query, Request
from fastapi.concurrency import run_in_threadpool
from sqlalchemy.orm import Session, sessionmaker

from service.access import auth
from service.access.auth import Principal
from service.catalogue.deps import SkuPath
from service.core.audit_trail import NOTHING_STORED, mark
from service.core.db import session_scope
from service.core.deps import READ, ReadSession, ReadSessions, RecommendationWriter
from service.core.group_commit import GroupWriter
from service.core.pagination import decode_cursor, encode_cursor
from service.core.responses import problems
from service.core.schemas import SKU_PATTERN, DateTimeText, Page
from service.core.tables import as_utc
from service.pricing import recommendations as pricing
from service.pricing import review
from service.pricing.review_schemas import RecommendationState
from service.pricing.schemas import (
    FamilyPriceRequest,
    FamilyRecommendationOut,
    OptimalPriceRequest,
    RecommendationOut,
)

router = APIRouter(tags=["prices"])
Writer = GroupWriter[Any, dict[str, Any]]

CAUTION = (
    " Recommendations are estimates from past data, not instructions: have a person or a "
    "written policy approve prices before they go live, and check them against the pricing "
    "rules of your jurisdiction (emergency price caps, below-cost sales, reference prices, "
    "competition law)."
)


@router.post(
    "/v1/products/{sku}/optimal-price",
    response_model=RecommendationOut,
    response_model_exclude_none=False,
    operation_id="optimal_price",
    summary="Recommend the revenue- or profit-maximising price under business constraints",
    description=(
        "Uses the product's active fit. Prices stay within the observed range widened by "
        "10% unless `allow_extrapolation` is set; any price outside the observed range is "
        "warned. A fit whose own-price effect has the wrong sign never becomes active (a "
        "quality gate rejects it), so such a product answers 404; were one priced, the "
        "answer would be 409 unless `allow_wrong_sign`." + CAUTION
    ),
    responses=problems(404, 409, 422),
)
async def optimal_price(
    sku: SkuPath,
    body: OptimalPriceRequest,
    reads: ReadSessions,
    writer: RecommendationWriter,
    request: Request,
    principal: Annotated[Principal, READ],
) -> RecommendationOut:
    _may_store(request, principal, body.store)
    # The hottest route for back ends: its whole body is one worker-thread call.
    return await run_in_threadpool(_optimal_price, reads, writer, sku, body)


def _may_store(request: Request, principal: Principal, store: bool) -> None:
    """Storing needs the write scope; an answer that is not stored changes nothing."""
    if store:
        auth.require(principal, "write")
    else:
        mark(request, NOTHING_STORED)


def _optimal_price(
    reads: sessionmaker[Session], writer: Writer, sku: str, body: OptimalPriceRequest
) -> RecommendationOut:
    # Read and optimise outside the write lock; one connection at a time.
    with session_scope(reads) as reader:
        priced = pricing.recommend(reader, sku=sku, body=body)
    if not body.store:
        return RecommendationOut(**_unstored(priced))
    stored = writer.submit([priced])[0]
    return RecommendationOut(**stored)


def _unstored(priced: pricing.Priced) -> dict[str, Any]:
    return {**priced.result, "id": None, "sku": priced.sku, "fit_id": priced.fit_id}


@router.post(
    "/v1/families/{family}/optimal-prices",
    response_model=FamilyRecommendationOut,
    operation_id="family_optimal_prices",
    summary="Recommend joint prices for a family, with cross-price effects and order constraints",
    description=(
        "Maximises the family's total revenue or profit over the prices of its products "
        "that have an active fit (the others are listed in `excluded`)." + CAUTION
    ),
    responses=problems(404, 409, 422),
)
async def family_optimal_prices(
    family: Annotated[str, Path(pattern=SKU_PATTERN)],
    body: FamilyPriceRequest,
    reads: ReadSessions,
    writer: RecommendationWriter,
    request: Request,
    principal: Annotated[Principal, READ],
) -> FamilyRecommendationOut:
    _may_store(request, principal, body.store)
    return await run_in_threadpool(_family_optimal_prices, reads, writer, family, body)


def _family_optimal_prices(
    reads: sessionmaker[Session], writer: Writer, family: str, body: FamilyPriceRequest
) -> FamilyRecommendationOut:
    with session_scope(reads) as reader:
        answer, priced = pricing.recommend_family(reader, family=family, body=body)
    stored = writer.submit(priced) if body.store else [_unstored(p) for p in priced]
    return FamilyRecommendationOut(**answer, products=stored)


@router.get(
    "/v1/recommendations",
    response_model=Page[RecommendationOut],
    dependencies=[READ],
    operation_id="list_recommendations",
    summary="The latest recommendation of each product, for back ends that pull nightly",
    description=(
        "By default the latest approved recommendation of each product: the prices a person "
        "or an approval policy let go live (`approved_price` from `effective_from`). "
        "`state` lists the latest in another state, or `any` the latest of all." + CAUTION
    ),
    responses=problems(422),
)
def list_recommendations(
    session: ReadSession,
    family: Annotated[str | None, Query(pattern=SKU_PATTERN)] = None,
    state: Annotated[
        RecommendationState | Literal["any"],
        Query(description="Which recommendations: the latest in this state (default approved)"),
    ] = "approved",
    since: Annotated[
        DateTimeText | None,
        Query(description="Only recommendations made at or after this time (RFC 3339)"),
    ] = None,
    limit: Annotated[int, Query(ge=1, le=500)] = 100,
    cursor: Annotated[
        str | None, Query(description="From `next_cursor` of the previous page")
    ] = None,
) -> Page[RecommendationOut]:
    position = decode_cursor(cursor)
    after = str(position["after"]) if position and "after" in position else None
    since_utc = as_utc(since) if since is not None else None
    rows, more = pricing.latest_page(
        session,
        family=family,
        since=since_utc,
        limit=limit,
        after_sku=after,
        state=None if state == "any" else state,
    )
    items = [
        RecommendationOut(
            **{
                **pricing.answer(
                    row.result,
                    row_id=row.id,
                    sku=sku,
                    fit_id=row.fit_id,
                    created_at=as_utc(row.created_at),
                ),
                **review.review_fields(row),
                "effective_from": effective_from,
                "curve": None,
            }
        )
        for row, sku, effective_from in rows
    ]
    next_cursor = encode_cursor({"after": rows[-1][1]}) if more and rows else None
    return Page[RecommendationOut](items=items, next_cursor=next_cursor)
