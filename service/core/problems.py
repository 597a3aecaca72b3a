"""The one mapping from errors to RFC 9457 problem+json answers.

Domain errors (:mod:`service.core.errors`), the numerical library's errors, request
validation, routing errors and database failures all become problem documents here, and
nowhere else. No stack trace or internal message of an unexpected error ever leaves the
server.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass
from typing import Any

from fastapi import FastAPI, Request
from fastapi.exceptions import RequestValidationError
from fastapi.responses import JSONResponse
from sqlalchemy.exc import DBAPIError, IntegrityError, OperationalError
from sqlalchemy.exc import TimeoutError as PoolTimeout
from starlette.exceptions import HTTPException as StarletteHTTPException

from service.core.errors import (
    LIBRARY_ERRORS,
    Conflict,
    ErrorItem,
    Forbidden,
    InvalidInput,
    NotFound,
    PayloadTooLarge,
    ServiceError,
    StorageFull,
    Unauthenticated,
    Unavailable,
    UnsupportedMediaType,
    database_cause,
    from_library,
    is_storage_full,
)

PROBLEM_JSON = "application/problem+json"
PROBLEM_BASE = "https://marginal.example/problems/"
logger = logging.getLogger("marginal")


@dataclass(frozen=True)
class ProblemType:
    status: int
    slug: str
    title: str
    headers: tuple[tuple[str, str], ...] = ()


PROBLEM_TYPES: dict[type[ServiceError], ProblemType] = {
    InvalidInput: ProblemType(422, "invalid-input", "The request has invalid input"),
    NotFound: ProblemType(404, "not-found", "Not found"),
    Conflict: ProblemType(409, "conflict", "Conflict with the current state"),
    PayloadTooLarge: ProblemType(413, "payload-too-large", "Request body too large"),
    UnsupportedMediaType: ProblemType(415, "unsupported-media-type", "Unsupported content type"),
    Unauthenticated: ProblemType(
        401,
        "unauthenticated",
        "Authentication required",
        (("WWW-Authenticate", 'Bearer realm="marginal"'),),
    ),
    Forbidden: ProblemType(403, "forbidden", "The API key lacks the required scope"),
    Unavailable: ProblemType(
        503, "database-unavailable", "Service temporarily unavailable", (("Retry-After", "5"),)
    ),
    StorageFull: ProblemType(
        503, "storage-full", "The database's storage is full", (("Retry-After", "60"),)
    ),
}
BAD_REQUEST = ProblemType(400, "bad-request", "Bad request")
INTERNAL = ProblemType(500, "internal", "Internal error")
INTERNAL_DETAIL = "The server hit an unexpected error; it has been logged."


def problem_type(exc: ServiceError) -> ProblemType:
    """The problem type of a domain error: its own class's, else its nearest base's."""
    for cls in type(exc).__mro__:
        if cls in PROBLEM_TYPES:
            return PROBLEM_TYPES[cls]
    return BAD_REQUEST


def problem_response(
    kind: ProblemType,
    detail: str,
    *,
    errors: list[ErrorItem] | None = None,
    instance: str | None = None,
) -> JSONResponse:
    body: dict[str, Any] = {
        "type": PROBLEM_BASE + kind.slug,
        "title": kind.title,
        "status": kind.status,
        "detail": detail,
    }
    if instance:
        body["instance"] = instance
    if errors:
        body["errors"] = [e.to_dict() for e in errors]
    return JSONResponse(
        body, status_code=kind.status, media_type=PROBLEM_JSON, headers=dict(kind.headers) or None
    )


def error_response(exc: ServiceError, *, instance: str | None = None) -> JSONResponse:
    """A domain error as its problem document."""
    return problem_response(problem_type(exc), exc.detail, errors=exc.errors, instance=instance)


def _location(loc: tuple[Any, ...]) -> str:
    parts = [str(p) for p in loc if p not in ("body", "query", "path", "header")]
    out = ""
    for p in parts:
        out += f"[{p}]" if p.isdigit() else (f".{p}" if out else p)
    return out or "body"


def _is_outage(exc: DBAPIError) -> bool:
    return bool(exc.connection_invalidated) or isinstance(exc, OperationalError)


def install(app: FastAPI) -> None:
    """Register every error handler of the application."""

    @app.exception_handler(ServiceError)
    async def _service_error(request: Request, exc: ServiceError) -> JSONResponse:
        return error_response(exc, instance=request.url.path)

    async def _library_error(request: Request, exc: Exception) -> JSONResponse:
        return error_response(from_library(exc), instance=request.url.path)

    for library_error in LIBRARY_ERRORS:
        app.add_exception_handler(library_error, _library_error)

    @app.exception_handler(RequestValidationError)
    async def _validation_error(request: Request, exc: RequestValidationError) -> JSONResponse:
        malformed = [e for e in exc.errors() if e.get("type") == "json_invalid"]
        if malformed:
            where = malformed[0].get("ctx", {}).get("error", "")
            return problem_response(
                BAD_REQUEST,
                "the body is not valid JSON" + (f" ({where})" if where else ""),
                errors=[ErrorItem(field="body", message="not valid JSON")],
                instance=request.url.path,
            )
        items = [
            ErrorItem(
                field=_location(tuple(e.get("loc", ()))), message=str(e.get("msg", "invalid"))
            )
            for e in exc.errors()
        ]
        return error_response(
            InvalidInput(f"{len(items)} problem(s) with the request", errors=items),
            instance=request.url.path,
        )

    @app.exception_handler(StarletteHTTPException)
    async def _http_error(request: Request, exc: StarletteHTTPException) -> JSONResponse:
        titles = {404: "Not found", 405: "Method not allowed"}
        kind = ProblemType(
            exc.status_code,
            f"http-{exc.status_code}",
            titles.get(exc.status_code, "Request refused"),
            tuple((getattr(exc, "headers", None) or {}).items()),
        )
        return problem_response(kind, str(exc.detail), instance=request.url.path)

    async def _database_error(request: Request, exc: Exception) -> JSONResponse:
        if is_storage_full(exc):
            logger.error(
                "database storage is full on %s %s (%s)",
                request.method,
                request.url.path,
                database_cause(exc),
            )
            return error_response(
                StorageFull(
                    "The database's storage is full, so nothing could be written; "
                    "nothing was stored. Retry once an operator has made room."
                ),
                instance=request.url.path,
            )
        if isinstance(exc, DBAPIError) and not _is_outage(exc):
            logger.exception("database error on %s %s", request.method, request.url.path)
            return problem_response(INTERNAL, INTERNAL_DETAIL, instance=request.url.path)
        logger.warning(
            "database unavailable on %s %s (%s)",
            request.method,
            request.url.path,
            database_cause(exc),
        )
        return error_response(
            Unavailable("The database cannot be reached right now; retry shortly."),
            instance=request.url.path,
        )

    async def _concurrent_change(request: Request, exc: Exception) -> JSONResponse:
        return error_response(
            Conflict("a concurrent request changed the same records; retry the request"),
            instance=request.url.path,
        )

    app.add_exception_handler(IntegrityError, _concurrent_change)
    app.add_exception_handler(OperationalError, _database_error)
    app.add_exception_handler(DBAPIError, _database_error)
    # No pooled connection came free in time: overloaded, not broken.
    app.add_exception_handler(PoolTimeout, _database_error)

    @app.exception_handler(Exception)
    async def _unexpected(request: Request, exc: Exception) -> JSONResponse:
        logger.exception("unhandled error on %s %s", request.method, request.url.path)
        return problem_response(INTERNAL, INTERNAL_DETAIL, instance=request.url.path)
