"""The audit log: one entry per change of state, written in the change's own transaction.

Entries are only ever added: nothing in the service updates or deletes one, and the
database refuses updates (and on PostgreSQL deletions) by trigger. ``actor_key_id`` is
the acting key's id, or None when a policy or the service itself acted; ``details`` then
names which (for example ``{"policy_id": 3}``).
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Mapping
from typing import Any

from sqlalchemy import insert
from sqlalchemy.orm import Session

from service.core.tables import AuditEntryRow, utcnow


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
    session.execute(
        insert(AuditEntryRow).values(
            at=at or utcnow(),
            actor_key_id=actor_key_id,
            action=action[:64],
            subject=subject[:200],
            details=dict(details),
        )
    )
