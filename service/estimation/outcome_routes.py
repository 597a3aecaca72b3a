"""Watched outcomes over HTTP: one product's, and a family's."""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Path

from service.catalogue.deps import SkuPath
from service.core.deps import READ, ReadSession
from service.core.responses import problems
from service.core.schemas import SKU_PATTERN
from service.estimation import outcomes
from service.estimation.outcome_schemas import (
    FamilyOutcomesOut,
    OutcomesOut,
    family_outcomes_out,
    outcomes_out,
)

router = APIRouter(tags=["demand models"])

ABOUT = (
    " Periods after the product's first stored recommendation (and after the active fit's "
    "last period) are watched: realised units against the units the active fit expected at "
    "the price actually charged and the period's drivers, with its 95% prediction interval. "
    "A drift flag suggests a refit; nothing is refitted automatically. These are estimates "
    "from past data, not instructions: a person decides what to do about them."
)


@router.get(
    "/v1/products/{sku}/outcomes",
    response_model=OutcomesOut,
    dependencies=[READ],
    operation_id="get_outcomes",
    summary="Realised against expected units after a recommendation, and the drift state",
    description="One row per watched period, the forecast error and the drift check." + ABOUT,
    responses=problems(404, 422),
)
def get_outcomes(sku: SkuPath, session: ReadSession) -> OutcomesOut:
    return outcomes_out(outcomes.watch(session, sku=sku))


@router.get(
    "/v1/families/{family}/outcomes",
    response_model=FamilyOutcomesOut,
    dependencies=[READ],
    operation_id="get_family_outcomes",
    summary="Forecast error and drift of every product of a family",
    description="Products without an active fit are listed with the reason." + ABOUT,
    responses=problems(404, 422),
)
def get_family_outcomes(
    family: Annotated[str, Path(pattern=SKU_PATTERN, description="The family's name")],
    session: ReadSession,
) -> FamilyOutcomesOut:
    watched, skipped = outcomes.watch_family(session, family=family)
    return family_outcomes_out(family, watched, skipped)
