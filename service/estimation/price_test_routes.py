"""Price tests over HTTP: ``POST /v1/products/{sku}/price-tests``."""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Request

from service.access import auth
from service.access.auth import Principal
from service.catalogue.deps import SkuPath
from service.core.db import session_scope
from service.core.deps import READ, ReadSession
from service.core.responses import problems
from service.core.tables import as_utc
from service.estimation import price_tests
from service.estimation.price_test_schemas import (
    PriceTestOut,
    PriceTestRequest,
    StoredPriceTests,
    price_test_out,
)

router = APIRouter(tags=["demand models"])

CAUTION = (
    " A plan is an estimate from past data, not an instruction: a person approves the "
    "prices before they go live, and the pricing rules of your jurisdiction (emergency "
    "price caps, below-cost sales, reference prices, price discrimination, competition "
    "law) and qualified advice take precedence."
)


@router.post(
    "/v1/products/{sku}/price-tests",
    response_model=PriceTestOut,
    operation_id="plan_price_test",
    summary="Plan a price test: prices for the next periods, the expected narrowing of the "
    "own-price interval, and the profit expected to be given up",
    description=(
        "For a product whose price barely varied or whose own-price interval is wide. Uses "
        "the active fit, else the latest rejected one. The price alternates a few percent "
        "either side of the centre price within the bounds; the narrowing follows from the "
        "fit's covariance with the test's periods added (docs/estimation.md), and the "
        "profit given up from the fitted curve. With `store` (write scope) the plan is "
        "stored and its periods mark the observations sent for them as test periods; a "
        "plan overlapping a stored one's periods is refused with 409." + CAUTION
    ),
    responses=problems(403, 404, 409, 422),
)
def plan_price_test(
    sku: SkuPath,
    body: PriceTestRequest,
    session: ReadSession,
    request: Request,
    principal: Annotated[Principal, READ],
) -> PriceTestOut:
    if body.store:
        auth.require(principal, "write")
    terms = price_tests.PlanTerms(
        n_periods=body.periods,
        step=body.step_pct / 100,
        centre_price=body.centre_price,
        min_price=body.min_price,
        max_price=body.max_price,
        covariates=dict(body.covariates),
        level=body.level,
        first_period=body.first_period,
    )
    planned = price_tests.plan_test(session, sku=sku, terms=terms)
    answer = price_test_out(planned)
    if not body.store:
        return answer
    # The app's write sessions: storing takes the write lock only when asked to.
    with session_scope(request.app.state.write_sessions) as writer:
        kept = price_tests.store(
            writer, planned=planned, answer=answer.model_dump(mode="json"), key_id=principal.key_id
        )
    return answer.model_copy(update={"id": kept.id, "created_at": kept.created_at})


@router.get(
    "/v1/products/{sku}/price-tests",
    response_model=StoredPriceTests,
    dependencies=[READ],
    operation_id="list_price_tests",
    summary="A product's stored price-test plans, newest first",
    responses=problems(404, 422),
)
def list_price_tests(sku: SkuPath, session: ReadSession) -> StoredPriceTests:
    items = []
    for row in price_tests.stored(session, sku=sku):
        plan = PriceTestOut.model_validate(row.plan)
        items.append(plan.model_copy(update={"id": row.id, "created_at": as_utc(row.created_at)}))
    return StoredPriceTests(items=items)
