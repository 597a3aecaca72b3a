"""Typed FastAPI dependencies: database sessions, the caller, and scope checks."""

from __future__ import annotations

import logging
from collections.abc import Iterator
from typing import Annotated, Any

from fastapi import Depends, Header, Request
from fastapi.concurrency import run_in_threadpool
from fastapi.params import Depends as DependsParam
from sqlalchemy import Engine
from sqlalchemy.exc import OperationalError
from sqlalchemy.orm import Session, sessionmaker

from service.access import auth
from service.access.auth import Principal, Scope
from service.core.db import WriteBusy, session_scope
from service.core.group_commit import GroupWriter
from service.core.settings import Settings

log = logging.getLogger("marginal.keys")


async def get_settings_dep(request: Request) -> Settings:
    # async: no I/O, so no hop to the thread pool.
    settings: Settings = request.app.state.settings
    return settings


def _factory(request: Request, name: str) -> sessionmaker[Session]:
    factory: sessionmaker[Session] = getattr(request.app.state, name)
    return factory


async def read_sessions(request: Request) -> sessionmaker[Session]:
    """For routes that run their whole body in one worker-thread call."""
    return _factory(request, "read_sessions")


async def bulk_sessions(request: Request) -> sessionmaker[Session]:
    """Write sessions tuned for loading many rows (imports)."""
    return _factory(request, "bulk_sessions")


async def recommendation_writer(request: Request) -> GroupWriter[Any, dict[str, Any]]:
    """The process's group commit of recommendations (see :mod:`service.core.group_commit`)."""
    writer: GroupWriter[Any, dict[str, Any]] = request.app.state.recommendation_writer
    return writer


async def engine(request: Request) -> Engine:
    found: Engine = request.app.state.engine
    return found


def read_session(request: Request) -> Iterator[Session]:
    with session_scope(_factory(request, "read_sessions")) as session:
        yield session


def write_session(request: Request) -> Iterator[Session]:
    with session_scope(_factory(request, "write_sessions")) as session:
        yield session


SettingsDep = Annotated[Settings, Depends(get_settings_dep)]
ReadSessions = Annotated[sessionmaker[Session], Depends(read_sessions)]
BulkSessions = Annotated[sessionmaker[Session], Depends(bulk_sessions)]
RecommendationWriter = Annotated[GroupWriter[Any, dict[str, Any]], Depends(recommendation_writer)]
EngineDep = Annotated[Engine, Depends(engine)]
# Scope "function": the session commits (or fails) before the response is sent, so a
# client is never told that something was stored when the commit did not happen, and
# reads that follow an answer see what it reported.
ReadSession = Annotated[Session, Depends(read_session, scope="function")]
WriteSession = Annotated[Session, Depends(write_session, scope="function")]


def _database(settings: Settings) -> str:
    return f"{settings.database_url}#{settings.database_schema or ''}"


def _lookup_caller(request: Request, authorization: str | None) -> Principal:
    """Verify the key in the database (in a worker thread)."""
    with session_scope(_factory(request, "read_sessions")) as session:
        principal, stale = auth.authenticate(session, authorization)
    # The read connection is back in the pool before a write takes another: a request
    # holding two connections at once lets concurrent writers take every pooled
    # connection while each waits for a second one.
    if stale:
        _touch(request, principal.key_id)
    settings: Settings = request.app.state.settings
    if authorization and settings.auth_cache_seconds > 0:
        auth.verified_keys.put(_database(settings), authorization, principal)
    return principal


def _touch(request: Request, key_id: str) -> None:
    """Note the key's use without ever holding up the request: on SQLite a write lock held
    by anyone else means no wait but no note (the time is a minute coarse anyway, and the
    next request tries again); any database error here is logged, never answered."""
    try:
        with session_scope(_factory(request, "touch_sessions")) as writer:
            auth.touch_key(writer, key_id=key_id)
    except WriteBusy:
        log.debug("key %s: last-used time left for later, a writer holds the database", key_id)
    except OperationalError as exc:
        log.info("key %s: last-used time left for later (%s)", key_id, exc.orig)


async def _caller(
    request: Request,
    authorization: Annotated[str | None, Header(include_in_schema=False)] = None,
) -> Principal:
    # async: a key verified moments ago costs no database lookup and no thread hop.
    settings: Settings = request.app.state.settings
    principal = (
        auth.verified_keys.get(_database(settings), authorization, settings.auth_cache_seconds)
        if authorization
        else None
    )
    if principal is None:
        principal = await run_in_threadpool(_lookup_caller, request, authorization)
    request.state.key_id = principal.key_id
    return principal


def check_scope(request: Request, authorization: str | None, scope: Scope) -> Principal:
    """The same check as :func:`requires`, for sync routes that decide at run time."""
    principal = _lookup_caller(request, authorization)
    request.state.key_id = principal.key_id
    auth.require(principal, scope)
    return principal


def requires(scope: Scope) -> DependsParam:
    """A dependency that admits callers whose key carries ``scope``."""

    async def check(principal: Annotated[Principal, Depends(_caller)]) -> Principal:
        # async: a pure check, so no hop to the thread pool.
        auth.require(principal, scope)
        return principal

    dependency: DependsParam = Depends(check)
    return dependency


READ = requires("read")
WRITE = requires("write")
ADMIN = requires("admin")
# Deciding: approving prices, activating fits a person chose.
APPROVE = requires("approve")
