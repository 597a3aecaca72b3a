"""The audit log: one entry per change of state, written in the change's own transaction.

Entries are only ever added: nothing in the service updates or deletes one, and the
database refuses updates (and on PostgreSQL deletions) by trigger. ``actor_key_id`` is
the acting key's id, or None when a policy or the service itself acted; ``details`` then
names which (for example ``{"policy_id": 3}``).
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Mapping
from contextvars import ContextVar
from dataclasses import dataclass
from typing import Any

from sqlalchemy import insert, select
from sqlalchemy.orm import Session

from service.core.tables import AuditEntryRow, as_utc, utcnow

requests_entries: ContextVar[list[str] | None] = ContextVar("audit_request_entries", default=None)
"""Set per HTTP request by :class:`service.core.audit_trail.AuditTrail`: the actions a
key's request wrote itself, so the trail adds no second entry for it."""


def write_audit(
    session: Session,
    *,
    actor_key_id: str | None,
    action: str,
    subject: str,
    details: Mapping[str, Any],
    at: dt.datetime | None = None,
) -> None:
    """Add one entry to the audit log in ``session``'s transaction (committed with it).

    ``action`` is a short name of what happened (``recommendation.approve``), ``subject``
    what it happened to (a sku, ``recommendation:12``, ``key:ab12``); ``details`` must be
    JSON-ready.
    """
    written = requests_entries.get()
    if written is not None and actor_key_id is not None:
        # Only a key's own entry stands for its request: an approval policy's entry
        # written in a shared group commit belongs to no request.
        written.append(action)
    session.execute(
        insert(AuditEntryRow).values(
            at=at or utcnow(),
            actor_key_id=actor_key_id,
            action=action[:64],
            subject=subject[:200],
            details=dict(details),
        )
    )


@dataclass(frozen=True)
class AuditEntry:
    id: int
    at: dt.datetime
    actor_key_id: str | None
    action: str
    subject: str
    details: dict[str, Any]


@dataclass(frozen=True)
class AuditFilter:
    """What to list: each given field narrows the entries (times in UTC, ``until``
    exclusive); ``before_id`` continues a page."""

    action: str | None = None
    subject: str | None = None
    actor_key_id: str | None = None
    since: dt.datetime | None = None
    until: dt.datetime | None = None
    before_id: int | None = None


def audit_page(
    session: Session, where: AuditFilter, *, limit: int
) -> tuple[list[AuditEntry], bool]:
    """Entries newest first, and whether more follow."""
    query = select(AuditEntryRow).order_by(AuditEntryRow.id.desc()).limit(limit + 1)
    if where.action is not None:
        query = query.where(AuditEntryRow.action == where.action)
    if where.subject is not None:
        query = query.where(AuditEntryRow.subject == where.subject)
    if where.actor_key_id is not None:
        query = query.where(AuditEntryRow.actor_key_id == where.actor_key_id)
    if where.since is not None:
        query = query.where(AuditEntryRow.at >= where.since)
    if where.until is not None:
        query = query.where(AuditEntryRow.at < where.until)
    if where.before_id is not None:
        query = query.where(AuditEntryRow.id < where.before_id)
    rows = list(session.scalars(query))
    entries = [
        AuditEntry(
            id=r.id,
            at=as_utc(r.at),
            actor_key_id=r.actor_key_id,
            action=r.action,
            subject=r.subject,
            details=dict(r.details or {}),
        )
        for r in rows[:limit]
    ]
    return entries, len(rows) > limit
