"""The FastAPI application: routers, error mapping, limits and shared state."""

from __future__ import annotations

import datetime as dt
import logging
import time
import uuid
from collections.abc import AsyncIterator
from contextlib import asynccontextmanager
from importlib import metadata

from fastapi import FastAPI
from fastapi.middleware.cors import CORSMiddleware
from sqlalchemy.exc import SQLAlchemyError
from starlette.types import ASGIApp, Message, Receive, Scope, Send

from service.access import routes as keys
from service.catalogue import import_routes as imports
from service.catalogue import observation_routes as observations
from service.catalogue import product_routes as products
from service.core import audit_routes, docs_pages, logs, metrics, problems
from service.core import health_routes as health
from service.core import metrics_routes as metrics_route
from service.core.audit_trail import AuditTrail
from service.core.db import make_engine, make_no_wait_factory, make_session_factory
from service.core.group_commit import GroupWriter
from service.core.limits import BodySizeLimit
from service.core.settings import Settings, get_settings
from service.estimation import outcome_routes as outcomes
from service.estimation import price_test_routes as price_tests
from service.estimation import routes as fits
from service.jobs import routes as jobs
from service.jobs import schedules
from service.jobs.worker import JobRunner, Worker
from service.pricing import recommendations as pricing_service
from service.pricing import review_routes as review
from service.pricing import routes as pricing
from service.pricing import rule_routes
from service.ui import routes as ui
from service.ui.links import STATIC_URL

API_DESCRIPTION = """\
Marginal estimates how demand for each product responds to its price and to other
drivers, and recommends revenue- or profit-maximising prices within business constraints.

**Cautions.** Every figure is an estimate from past data, not an instruction. Prices
outside the range a product was sold at are extrapolations, and responses say so.
Pricing is regulated: rules on price gouging in emergencies, below-cost sales,
reference-price ("was") claims, price discrimination and competition law differ by
jurisdiction. Have a person or a written local policy approve prices before they go
live; local law and qualified advice take precedence over anything this service says.

Errors are `application/problem+json` (RFC 9457). Authenticate with
`Authorization: Bearer <key>`; keys carry the scopes `read`, `write` and `admin`.
"""

logger = logging.getLogger("marginal")
access_log = logging.getLogger("marginal.access")


def create_app(settings: Settings | None = None) -> FastAPI:
    settings = settings or get_settings()

    @asynccontextmanager
    async def lifespan(app: FastAPI) -> AsyncIterator[None]:
        background = _start_background(app, settings)
        yield
        for thread in background:
            thread.stop()
        app.state.engine.dispose()

    app = FastAPI(
        title="Marginal",
        version=metadata.version("marginal"),
        description=API_DESCRIPTION,
        lifespan=lifespan,
        license_info={"name": "Apache-2.0"},
        docs_url=None,
        redoc_url=None,
    )
    engine = make_engine(settings)
    app.state.settings = settings
    app.state.engine = engine
    app.state.read_sessions = make_session_factory(engine, writer=False)
    app.state.write_sessions = make_session_factory(engine, writer=True)
    app.state.touch_sessions = make_no_wait_factory(engine)
    app.state.bulk_sessions = make_session_factory(engine, writer=True, bulk_load=True)
    app.state.recommendation_writer = GroupWriter(app.state.write_sessions, pricing_service.store)

    problems.install(app)
    app.add_middleware(
        BodySizeLimit,
        default_limit=settings.body_limit_bytes,
        import_limit=settings.import_limit_bytes,
    )
    if settings.cors_origins:
        # Off unless configured: browsers then refuse cross-origin calls by default.
        app.add_middleware(
            CORSMiddleware,
            allow_origins=settings.cors_origins,
            allow_methods=["GET", "POST", "PUT", "PATCH", "DELETE"],
            allow_headers=["Authorization", "Content-Type", "X-Request-ID"],
            expose_headers=["X-Request-ID", "Retry-After", "ETag"],
        )
    # Inside the observer, so that an audit entry carries the request's id.
    app.add_middleware(AuditTrail)
    app.add_middleware(RequestObserver)
    for router in (
        health.router,
        metrics_route.router,
        products.router,
        observations.router,
        imports.router,
        fits.router,
        price_tests.router,
        outcomes.router,
        pricing.router,
        review.router,
        rule_routes.router,
        audit_routes.router,
        jobs.router,
        keys.router,
        ui.router,
    ):
        app.include_router(router)
    app.mount(STATIC_URL, ui.static_files(), name="ui-static")
    docs_pages.install(app)
    return app


def _start_background(app: FastAPI, settings: Settings) -> list[Worker | schedules.Scheduler]:
    """The job worker and the scheduler, when enabled; interrupted jobs are failed first."""
    threads: list[Worker | schedules.Scheduler] = []
    if settings.worker_enabled:
        runner = JobRunner(app.state.engine, settings)
        try:
            runner.recover(dt.timedelta(seconds=settings.job_stale_seconds))
        except SQLAlchemyError:
            logger.exception("could not check for interrupted jobs")
        threads.append(Worker(runner, poll_seconds=settings.worker_poll_seconds))
    if settings.scheduler_enabled:
        threads.append(
            schedules.Scheduler(
                app.state.write_sessions, tick_seconds=settings.scheduler_tick_seconds
            )
        )
    for thread in threads:
        thread.start()
    return threads


class RequestObserver:
    """Request id, one structured log line and metrics per request (never the key itself).

    A plain ASGI middleware: Starlette's ``BaseHTTPMiddleware`` would relay every body
    through extra tasks and streams, which costs more than the rest of a small request.
    """

    def __init__(self, app: ASGIApp) -> None:
        self.app = app

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        request_id = _header(scope, b"x-request-id") or uuid.uuid4().hex
        state = scope.setdefault("state", {})
        state["request_id"] = request_id
        status = 500
        token = logs.request_id.set(request_id)
        started = time.perf_counter()

        async def send_with_id(message: Message) -> None:
            nonlocal status
            if message["type"] == "http.response.start":
                status = message["status"]
                message["headers"] = [
                    *message.get("headers", []),
                    (b"x-request-id", request_id.encode("latin-1")),
                ]
            await send(message)

        try:
            await self.app(scope, receive, send_with_id)
        finally:
            logs.request_id.reset(token)
            elapsed = time.perf_counter() - started
            method = scope["method"]
            route = getattr(scope.get("route"), "path", "unmatched")
            metrics.record_request(method, route, status, elapsed)
            access_log.info(
                "%s %s %s",
                method,
                route,
                status,
                extra={
                    "request_id": request_id,
                    "method": method,
                    "path": scope["path"],
                    "status": status,
                    "duration_ms": round(elapsed * 1000, 2),
                    "key_id": state.get("key_id"),
                },
            )


def _header(scope: Scope, name: bytes) -> str | None:
    for key, value in scope.get("headers") or ():
        if key == name:
            return str(value.decode("latin-1"))
    return None
