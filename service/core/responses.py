"""Shared OpenAPI fragments: documented problem+json error responses."""

from __future__ import annotations

from typing import Any

from service.core.schemas import Problem

_DESCRIPTIONS = {
    400: "The body could not be parsed (malformed JSON)",
    401: "No API key, or an unknown or revoked one",
    403: "The API key lacks the required scope",
    404: "The resource does not exist",
    409: "The request conflicts with the current state",
    413: "The request body is larger than the configured limit",
    415: "The request body has the wrong content type",
    422: "The input is invalid; `errors` says where and why",
    503: "The database is unreachable, or its storage is full (type `storage-full`); retry "
    "after the Retry-After delay",
}


def problems(*codes: int) -> dict[int | str, dict[str, Any]]:
    """OpenAPI `responses` entries for the given error statuses (auth ones always included)."""
    wanted = sorted({400, 401, 403, 503, *codes})
    return {
        code: {
            "model": Problem,
            "description": _DESCRIPTIONS[code],
            "content": {
                "application/problem+json": {"schema": {"$ref": "#/components/schemas/Problem"}}
            },
        }
        for code in wanted
    }
