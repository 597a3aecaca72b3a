"""Domain errors and their one mapping to RFC 9457 problem+json responses.

Service code raises these; only the handlers below decide what a client sees.
No stack trace or internal message of an unexpected error ever leaves the server.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass, field
from typing import Any

from fastapi import FastAPI, Request
from fastapi.exceptions import RequestValidationError
from fastapi.responses import JSONResponse
from starlette.exceptions import HTTPException as StarletteHTTPException

PROBLEM_JSON = "application/problem+json"
PROBLEM_BASE = "https://marginal.example/problems/"
logger = logging.getLogger("marginal")


@dataclass
class ErrorItem:
    """One reason a request was refused, pointing at a field or a CSV line and column."""

    message: str
    field: str | None = None
    line: int | None = None
    column: str | None = None

    def to_dict(self) -> dict[str, Any]:
        return {k: v for k, v in self.__dict__.items() if v is not None}


@dataclass
class ServiceError(Exception):
    """Base of every error a client may see; subclasses fix the status and problem type."""

    detail: str
    errors: list[ErrorItem] = field(default_factory=list)
    status = 400
    slug = "bad-request"
    title = "Bad request"
    headers: dict[str, str] = field(default_factory=dict)

    def __str__(self) -> str:
        return self.detail


class InvalidInput(ServiceError):
    status, slug, title = 422, "invalid-input", "The request has invalid input"


class NotFound(ServiceError):
    status, slug, title = 404, "not-found", "Not found"


class Conflict(ServiceError):
    status, slug, title = 409, "conflict", "Conflict with the current state"


class PayloadTooLarge(ServiceError):
    status, slug, title = 413, "payload-too-large", "Request body too large"


class UnsupportedMediaType(ServiceError):
    status, slug, title = 415, "unsupported-media-type", "Unsupported content type"


class Unauthenticated(ServiceError):
    status, slug, title = 401, "unauthenticated", "Authentication required"


class Forbidden(ServiceError):
    status, slug, title = 403, "forbidden", "The API key lacks the required scope"


class Unavailable(ServiceError):
    status, slug, title = 503, "unavailable", "Service temporarily unavailable"


def problem_response(
    *,
    status: int,
    slug: str,
    title: str,
    detail: str,
    errors: list[ErrorItem] | None = None,
    headers: dict[str, str] | None = None,
    instance: str | None = None,
) -> JSONResponse:
    body: dict[str, Any] = {
        "type": PROBLEM_BASE + slug,
        "title": title,
        "status": status,
        "detail": detail,
    }
    if instance:
        body["instance"] = instance
    if errors:
        body["errors"] = [e.to_dict() for e in errors]
    return JSONResponse(body, status_code=status, media_type=PROBLEM_JSON, headers=headers)


def _location(loc: tuple[Any, ...]) -> str:
    parts = [str(p) for p in loc if p not in ("body", "query", "path", "header")]
    out = ""
    for p in parts:
        out += f"[{p}]" if p.isdigit() else (f".{p}" if out else p)
    return out or "body"


def install_error_handlers(app: FastAPI) -> None:
    @app.exception_handler(ServiceError)
    async def _service_error(request: Request, exc: ServiceError) -> JSONResponse:
        return problem_response(
            status=exc.status,
            slug=exc.slug,
            title=exc.title,
            detail=exc.detail,
            errors=exc.errors,
            headers=exc.headers or None,
            instance=request.url.path,
        )

    @app.exception_handler(RequestValidationError)
    async def _validation_error(request: Request, exc: RequestValidationError) -> JSONResponse:
        items = [
            ErrorItem(
                field=_location(tuple(e.get("loc", ()))), message=str(e.get("msg", "invalid"))
            )
            for e in exc.errors()
        ]
        return problem_response(
            status=422,
            slug="invalid-input",
            title="The request has invalid input",
            detail=f"{len(items)} problem(s) with the request",
            errors=items,
            instance=request.url.path,
        )

    @app.exception_handler(StarletteHTTPException)
    async def _http_error(request: Request, exc: StarletteHTTPException) -> JSONResponse:
        titles = {404: "Not found", 405: "Method not allowed"}
        return problem_response(
            status=exc.status_code,
            slug=f"http-{exc.status_code}",
            title=titles.get(exc.status_code, "Request refused"),
            detail=str(exc.detail),
            headers=getattr(exc, "headers", None),
            instance=request.url.path,
        )

    @app.exception_handler(Exception)
    async def _unexpected(request: Request, exc: Exception) -> JSONResponse:
        logger.exception("unhandled error on %s %s", request.method, request.url.path)
        return problem_response(
            status=500,
            slug="internal",
            title="Internal error",
            detail="The server hit an unexpected error; it has been logged.",
            instance=request.url.path,
        )
