"""Price tests over HTTP: ``POST /v1/products/{sku}/price-tests``."""

from __future__ import annotations

from fastapi import APIRouter

from service.catalogue.deps import SkuPath
from service.core.deps import READ, ReadSession
from service.core.responses import problems
from service.estimation import price_tests
from service.estimation.price_test_schemas import PriceTestOut, PriceTestRequest, price_test_out

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
    dependencies=[READ],
    operation_id="plan_price_test",
    summary="Plan a price test: prices for the next periods, the expected narrowing of the "
    "own-price interval, and the profit expected to be given up",
    description=(
        "For a product whose price barely varied or whose own-price interval is wide. Uses "
        "the active fit, else the latest rejected one. The price alternates a few percent "
        "either side of the centre price within the bounds; the narrowing follows from the "
        "fit's covariance with the test's periods added (docs/estimation.md), and the "
        "profit given up from the fitted curve. Nothing is stored." + CAUTION
    ),
    responses=problems(404, 422),
)
def plan_price_test(sku: SkuPath, body: PriceTestRequest, session: ReadSession) -> PriceTestOut:
    terms = price_tests.PlanTerms(
        n_periods=body.periods,
        step=body.step_pct / 100,
        centre_price=body.centre_price,
        min_price=body.min_price,
        max_price=body.max_price,
        covariates=dict(body.covariates),
        level=body.level,
    )
    return price_test_out(price_tests.plan_test(session, sku=sku, terms=terms))
