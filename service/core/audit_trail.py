"""The audit trail of the HTTP API: one audit entry for every state-changing request that
succeeds, written before the answer leaves, with the acting key and the operation.

Routes that write a fuller entry in their own transaction with
:func:`service.core.audit.write_audit` (approvals, declines, policies, rules, keys, fit
activations) get no second one: the trail sees that the request wrote its entry. Calls
that stored nothing say so with :func:`mark` (``NOTHING_STORED``: a what-if price), and
``CHANGES_NOTHING`` names operations that only compute. Everything else that answers a
POST, PUT, PATCH or DELETE with a status below 400 gets an entry whose action is the
operation's id.
"""

from __future__ import annotations

import logging
from typing import Any

from fastapi import Request
from fastapi.concurrency import run_in_threadpool
from sqlalchemy.exc import SQLAlchemyError
from sqlalchemy.orm import Session, sessionmaker
from starlette.types import ASGIApp, Message, Receive, Scope, Send

from service.core.audit import requests_entries, write_audit
from service.core.db import session_scope

log = logging.getLogger("marginal.audit")

WRITE_METHODS = frozenset({"POST", "PUT", "PATCH", "DELETE"})
CHANGES_NOTHING = frozenset({"predict", "plan_price_test"})
"""Operations sent by POST that only compute (the request body is too large for a GET)."""

WRITTEN = "written"
NOTHING_STORED = "nothing stored"


def mark(request: Request, how: str) -> None:
    """Tell the trail this request's entry is written (``WRITTEN``) or not due
    (``NOTHING_STORED``)."""
    request.state.audit = how


def subject_of(path_params: dict[str, Any], path: str) -> str:
    """What a request acted on: its sku if it has one, else its other path values, else
    its path."""
    if "sku" in path_params:
        return str(path_params["sku"])
    if path_params:
        return ",".join(f"{k}:{v}" for k, v in sorted(path_params.items()))
    return path


class AuditTrail:
    """A plain ASGI middleware (see :class:`service.core.app.RequestObserver` for why)."""

    def __init__(self, app: ASGIApp) -> None:
        self.app = app

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http" or scope["method"] not in WRITE_METHODS:
            await self.app(scope, receive, send)
            return

        async def send_after_entry(message: Message) -> None:
            if message["type"] == "http.response.start" and message["status"] < 400:
                await self._record(scope, message["status"])
            await send(message)

        written: list[str] = []
        token = requests_entries.set(written)
        try:
            await self.app(scope, receive, send_after_entry)
        finally:
            requests_entries.reset(token)

    async def _record(self, scope: Scope, status: int) -> None:
        state = scope.get("state") or {}
        route = scope.get("route")
        operation = getattr(route, "operation_id", None) or getattr(route, "name", None)
        if (
            requests_entries.get()
            or state.get("audit") in (WRITTEN, NOTHING_STORED)
            or operation in CHANGES_NOTHING
        ):
            return
        sessions: sessionmaker[Session] = scope["app"].state.write_sessions
        details = {
            "method": scope["method"],
            "path": scope["path"],
            "status": status,
            "request_id": state.get("request_id"),
        }
        subject = subject_of(dict(scope.get("path_params") or {}), scope["path"])
        try:
            await run_in_threadpool(
                _write,
                sessions,
                actor=state.get("key_id"),
                action=str(operation or "unmatched"),
                subject=subject,
                details=details,
            )
        except SQLAlchemyError:
            # The change itself is committed; its answer still goes out, and the gap is
            # logged loudly for an operator.
            log.exception("audit entry not written for %s %s", scope["method"], scope["path"])


def _write(
    sessions: sessionmaker[Session],
    *,
    actor: str | None,
    action: str,
    subject: str,
    details: dict[str, Any],
) -> None:
    with session_scope(sessions) as session:
        write_audit(session, actor_key_id=actor, action=action, subject=subject, details=details)
