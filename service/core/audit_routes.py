"""The audit log for administrators: who changed what and when, newest first."""

from __future__ import annotations

import datetime as dt
from typing import Annotated, Any

from fastapi import APIRouter, Query
from pydantic import BaseModel, Field

from service.core.audit import AuditFilter, audit_page
from service.core.deps import ADMIN, ReadSession
from service.core.pagination import cursor_int, decode_cursor, encode_cursor
from service.core.responses import problems
from service.core.schemas import DateTimeText, Page
from service.core.tables import to_utc

router = APIRouter(tags=["audit"])


class AuditEntryOut(BaseModel):
    id: int
    at: dt.datetime
    actor_key_id: str | None = Field(
        description="The acting key's id; null when an approval policy or the service acted "
        "(`details` then names which)"
    )
    action: str = Field(description="What was done: the API operation or a named step")
    subject: str = Field(description="What it was done to: a sku, or the other path values")
    details: dict[str, Any]


@router.get(
    "/v1/audit",
    response_model=Page[AuditEntryOut],
    dependencies=[ADMIN],
    operation_id="list_audit_entries",
    summary="The audit log: every change made through the API, newest first",
    description=(
        "Entries are only ever added: no operation changes or removes one. Each "
        "state-changing call that succeeds writes one entry with the acting key's id."
    ),
    responses=problems(422),
)
def list_audit_entries(
    session: ReadSession,
    action: Annotated[str | None, Query(max_length=64)] = None,
    subject: Annotated[
        str | None, Query(max_length=200, description="A sku, or other path values")
    ] = None,
    actor: Annotated[
        str | None, Query(pattern=r"^[0-9a-f]{1,16}$", description="The acting key's id")
    ] = None,
    since: Annotated[
        DateTimeText | None, Query(description="Entries at or after this time (RFC 3339)")
    ] = None,
    until: Annotated[
        DateTimeText | None, Query(description="Entries before this time (RFC 3339)")
    ] = None,
    limit: Annotated[int, Query(ge=1, le=500)] = 100,
    cursor: Annotated[
        str | None, Query(description="From `next_cursor` of the previous page")
    ] = None,
) -> Page[AuditEntryOut]:
    before = cursor_int(decode_cursor(cursor), "before")
    entries, more = audit_page(
        session,
        AuditFilter(
            action=action,
            subject=subject,
            actor_key_id=actor,
            since=None if since is None else to_utc(since),
            until=None if until is None else to_utc(until),
            before_id=before,
        ),
        limit=limit,
    )
    items = [AuditEntryOut(**e.__dict__) for e in entries]
    next_cursor = encode_cursor({"before": entries[-1].id}) if more and entries else None
    return Page[AuditEntryOut](items=items, next_cursor=next_cursor)
