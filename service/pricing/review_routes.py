"""The reviewed path over HTTP: approve or decline a stored recommendation, the price
record of a product, and approval policies."""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Path, Query, Request, Response, status

from service.access.auth import Principal
from service.catalogue.deps import ReadProduct
from service.core.deps import APPROVE, READ, ReadSession, WriteSession
from service.core.pagination import MAX_ID
from service.core.responses import problems
from service.core.tables import utcnow
from service.pricing import policies, price_record, review
from service.pricing.review_schemas import (
    ApprovalIn,
    DecisionOut,
    DeclineIn,
    PolicyIn,
    PolicyOut,
    PriceEntryOut,
    PriceRecordOut,
)

router = APIRouter(tags=["review"])
RecommendationId = Annotated[int, Path(ge=1, le=MAX_ID)]
PolicyId = Annotated[int, Path(ge=1, le=MAX_ID)]

DECIDES = (
    " A person (a key with the `approve` scope) or a written approval policy decides which "
    "price goes live: recommendations are estimates from past data, not instructions, and "
    "local law and qualified advice take precedence over them."
)


def _decision(found: review.Decision) -> DecisionOut:
    return DecisionOut(
        id=found.recommendation_id,
        sku=found.sku,
        state=found.state,
        price=found.price,
        effective_from=None if found.entry is None else found.entry.effective_from,
    )


@router.post(
    "/v1/recommendations/{recommendation_id}/approve",
    response_model=DecisionOut,
    operation_id="approve_recommendation",
    summary="Approve a proposed recommendation, possibly at an edited price",
    description=(
        "The price (the recommended one, or `price`) becomes the product's live price from "
        "`effective_at` (default now) in its price record. Only a proposed recommendation "
        "can be approved: a declined, superseded or already approved one answers 409." + DECIDES
    ),
    responses=problems(404, 409, 422),
)
def approve_recommendation(
    recommendation_id: RecommendationId,
    body: ApprovalIn,
    session: WriteSession,
    request: Request,
    principal: Annotated[Principal, APPROVE],
) -> DecisionOut:
    found = review.approve(
        session,
        recommendation_id=recommendation_id,
        actor_key_id=principal.key_id,
        price=body.price,
        note=body.note,
        effective_at=body.effective_at,
    )
    return _decision(found)


@router.post(
    "/v1/recommendations/{recommendation_id}/decline",
    response_model=DecisionOut,
    operation_id="decline_recommendation",
    summary="Decline a proposed recommendation, saying why",
    description="Only a proposed recommendation can be declined; others answer 409." + DECIDES,
    responses=problems(404, 409, 422),
)
def decline_recommendation(
    recommendation_id: RecommendationId,
    body: DeclineIn,
    session: WriteSession,
    request: Request,
    principal: Annotated[Principal, APPROVE],
) -> DecisionOut:
    found = review.decline(
        session, recommendation_id=recommendation_id, actor_key_id=principal.key_id, note=body.note
    )
    return _decision(found)


@router.get(
    "/v1/products/{sku}/prices",
    response_model=PriceRecordOut,
    dependencies=[READ],
    operation_id="get_price_record",
    summary="The product's price record: every live price with its span, who set it and why",
    description=(
        "Entries are never changed or removed; a correction is a new entry. `prior_price` "
        "is the lowest price live in the 30 days before now. Whether and how a prior price "
        "must be shown depends on the jurisdiction: local law and qualified advice decide."
    ),
    responses=problems(404, 422),
)
def get_price_record(product: ReadProduct, session: ReadSession) -> PriceRecordOut:
    now = utcnow()
    record = price_record.entries(session, product.id)
    live = price_record.live_price(session, product.id, now)
    return PriceRecordOut(
        sku=product.sku,
        currency=product.currency,
        live_price=None if live is None else live.price,
        prior_price=price_record.prior_lowest_price(session, product.id, now),
        last_change=price_record.last_change(session, product.id, now),
        entries=[
            PriceEntryOut(
                price=e.price,
                effective_from=e.effective_from,
                effective_to=e.effective_to,
                set_by_key_id=e.set_by_key_id,
                policy_id=e.policy_id,
                recommendation_id=e.recommendation_id,
                fit_id=e.fit_id,
                note=e.note,
            )
            for e in reversed(record)
        ],
    )


@router.post(
    "/v1/approval-policies",
    response_model=PolicyOut,
    status_code=status.HTTP_201_CREATED,
    operation_id="create_approval_policy",
    summary="Set limits within which stored recommendations are approved without a person",
    description=(
        "A stored recommendation whose price change is under `max_change_pct` and whose "
        "margin is above `min_margin_pct` (if set) is approved when it is stored; the price "
        "record names the policy. The most specific policy covering a product decides "
        "(product, then family, then catalogue)." + DECIDES
    ),
    responses=problems(404, 422),
)
def create_approval_policy(
    body: PolicyIn,
    session: WriteSession,
    request: Request,
    principal: Annotated[Principal, APPROVE],
) -> PolicyOut:
    created = policies.create_policy(
        session,
        actor_key_id=principal.key_id,
        name=body.name,
        applies_to=body.applies_to,
        target=body.target,
        max_change_pct=body.max_change_pct,
        min_margin_pct=body.min_margin_pct,
    )
    return PolicyOut(**created.__dict__)


@router.get(
    "/v1/approval-policies",
    response_model=list[PolicyOut],
    dependencies=[READ],
    operation_id="list_approval_policies",
    summary="Approval policies that apply now (and ended ones, if asked)",
    responses=problems(422),
)
def list_approval_policies(
    session: ReadSession, include_ended: Annotated[bool, Query()] = False
) -> list[PolicyOut]:
    return [
        PolicyOut(**p.__dict__)
        for p in policies.list_policies(session, include_ended=include_ended)
    ]


@router.delete(
    "/v1/approval-policies/{policy_id}",
    status_code=status.HTTP_204_NO_CONTENT,
    operation_id="end_approval_policy",
    summary="End an approval policy: it approves nothing more and stays on record",
    responses=problems(404, 409, 422),
)
def end_approval_policy(
    policy_id: PolicyId,
    session: WriteSession,
    request: Request,
    principal: Annotated[Principal, APPROVE],
) -> Response:
    policies.end_policy(session, actor_key_id=principal.key_id, policy_id=policy_id)
    return Response(status_code=status.HTTP_204_NO_CONTENT)
