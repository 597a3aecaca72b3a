"""Liveness and readiness probes (no API key needed)."""

from __future__ import annotations

from fastapi import APIRouter
from fastapi.responses import JSONResponse
from sqlalchemy.exc import SQLAlchemyError

from service.core import migrate
from service.core.deps import EngineDep, SettingsDep
from service.core.schemas import Health, Readiness

router = APIRouter(tags=["health"])


@router.get("/healthz", response_model=Health, operation_id="health", summary="Liveness")
def health() -> Health:
    return Health(status="ok")


@router.get(
    "/readyz",
    response_model=Readiness,
    operation_id="readiness",
    summary="Readiness: database reachable and its schema at the latest step",
    responses={503: {"model": Readiness, "description": "Not ready"}},
)
def readiness(settings: SettingsDep, engine: EngineDep) -> JSONResponse:
    expected = migrate.head_revision(settings)
    try:
        current = migrate.current_revision(engine)
        reachable = True
    except SQLAlchemyError:
        current, reachable = None, False
    ready = reachable and current == expected
    body = Readiness(
        status="ready" if ready else "not ready",
        database="reachable" if reachable else "unreachable",
        schema_step=current,
        latest_step=expected,
    )
    return JSONResponse(
        body.model_dump(),
        status_code=200 if ready else 503,
        headers=None if ready else {"Retry-After": "5"},
    )
