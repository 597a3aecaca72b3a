"""Prometheus metrics in the text exposition format."""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Header, Request, Response

from service.core import metrics
from service.core.deps import SettingsDep, check_scope

router = APIRouter(tags=["health"])


@router.get(
    "/metrics",
    operation_id="metrics",
    summary="Prometheus metrics",
    response_class=Response,
    responses={200: {"content": {"text/plain": {}}, "description": "Prometheus text format"}},
)
def get_metrics(
    request: Request,
    settings: SettingsDep,
    authorization: Annotated[str | None, Header(include_in_schema=False)] = None,
) -> Response:
    """Public unless `MARGINAL_METRICS_PUBLIC=false`, which asks for an admin key."""
    if not settings.metrics_public:
        check_scope(request, authorization, "admin")
    body, content_type = metrics.exposition()
    return Response(body, media_type=content_type)
