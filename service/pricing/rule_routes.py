"""Jurisdiction rules over HTTP: add, list and end them, and the rules of one product."""

from __future__ import annotations

import datetime as dt
from typing import Annotated

from fastapi import APIRouter, Path, Query, Request, status

from service.access.auth import Principal
from service.catalogue.deps import ReadProduct
from service.core.audit_trail import WRITTEN, mark
from service.core.deps import ADMIN, READ, ReadSession, WriteSession
from service.core.pagination import MAX_ID
from service.core.responses import problems
from service.core.schemas import Family
from service.core.tables import utcnow
from service.pricing import rules
from service.pricing.rule_schemas import RULES_CAUTION, RuleIn, RuleList, RuleOut

router = APIRouter(tags=["jurisdiction rules"])
RuleId = Annotated[int, Path(ge=1, le=MAX_ID)]

WHO = (
    " Adding and ending rules needs the `admin` scope: the people who approve prices "
    "(`approve` scope) work within the rules and do not set them."
)


def rule_out(rule: rules.Rule, now: dt.datetime) -> RuleOut:
    return RuleOut(**rule.to_dict(), in_effect=rule.in_effect(now))


@router.post(
    "/v1/jurisdiction-rules",
    response_model=RuleOut,
    status_code=status.HTTP_201_CREATED,
    operation_id="add_jurisdiction_rule",
    summary="Add a jurisdiction rule for a product, a family or the catalogue",
    description=(
        "From now on the optimiser keeps recommended prices within the rule, the answer "
        "names the rule when it holds the price (`binding_rules`), and an approval that "
        "would break it is refused (409, naming the rule). " + RULES_CAUTION + WHO
    ),
    responses=problems(409, 422),
)
def add_jurisdiction_rule(
    body: RuleIn,
    session: WriteSession,
    request: Request,
    principal: Annotated[Principal, ADMIN],
) -> RuleOut:
    rule = rules.add(session, values=body.model_dump(), actor_key_id=principal.key_id)
    mark(request, WRITTEN)  # the rule wrote its own, fuller audit entry
    return rule_out(rule, utcnow())


@router.get(
    "/v1/jurisdiction-rules",
    response_model=RuleList,
    dependencies=[READ],
    operation_id="list_jurisdiction_rules",
    summary="Jurisdiction rules, by id",
    description="Every rule, ended ones included unless `in_effect` is true. " + RULES_CAUTION,
    responses=problems(422),
)
def list_jurisdiction_rules(
    session: ReadSession,
    in_effect: Annotated[bool, Query(description="Only the rules that apply now")] = False,
    family: Annotated[
        Family | None, Query(description="Only the catalogue's and this family's rules")
    ] = None,
) -> RuleList:
    now = utcnow()
    found = rules.listed(session, family=family, in_effect_at=now if in_effect else None)
    return RuleList(items=[rule_out(r, now) for r in found])


@router.delete(
    "/v1/jurisdiction-rules/{rule_id}",
    response_model=RuleOut,
    operation_id="end_jurisdiction_rule",
    summary="End a jurisdiction rule now (it stays stored)",
    description=(
        "The rule stops applying to prices worked out or approved from now on; it stays "
        "listed with `ended_at`, so what was in effect stays known. 409 if already ended." + WHO
    ),
    responses=problems(404, 409, 422),
)
def end_jurisdiction_rule(
    rule_id: RuleId,
    session: WriteSession,
    request: Request,
    principal: Annotated[Principal, ADMIN],
) -> RuleOut:
    rule = rules.end(session, rule_id=rule_id, actor_key_id=principal.key_id)
    mark(request, WRITTEN)  # the rule wrote its own, fuller audit entry
    return rule_out(rule, utcnow())


@router.get(
    "/v1/products/{sku}/jurisdiction-rules",
    response_model=RuleList,
    dependencies=[READ],
    operation_id="list_product_jurisdiction_rules",
    summary="The jurisdiction rules in effect for a product now",
    description="The catalogue's, the product's family's and the product's own rules in "
    "effect. " + RULES_CAUTION,
    responses=problems(404, 422),
)
def list_product_jurisdiction_rules(product: ReadProduct, session: ReadSession) -> RuleList:
    now = utcnow()
    found = rules.in_effect(session, sku=product.sku, family=product.family, at=now)
    return RuleList(items=[rule_out(r, now) for r in found])
