"""Batch jobs: creation, claiming by a worker, progress, recovery after a crash.

A job runs outside the request that created it: in the service's worker thread, in a
`marginal worker` process, or in the CLI (`marginal refit` claims the job it creates).
Work is committed in batches; each batch writes its results and the job's progress in
one transaction, so a job that dies leaves every product either untouched or done.
"""

from __future__ import annotations

import datetime as dt
import os
import socket
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

from sqlalchemy import select, update
from sqlalchemy.orm import Session, sessionmaker

from service.core.db import session_scope
from service.core.errors import ErrorItem, InvalidInput, NotFound
from service.core.tables import JobRow, ProductRow, as_utc, utcnow

KINDS = ("refit", "reprice")
QUEUED, RUNNING, SUCCEEDED, FAILED, CANCELLED = (
    "queued",
    "running",
    "succeeded",
    "failed",
    "cancelled",
)
FINISHED = (SUCCEEDED, FAILED, CANCELLED)
MAX_STORED_ERRORS = 1000
COUNT_NAMES = ("activated", "rejected", "awaiting_review", "failed", "unchanged")
# Counts a reprice job adds to them.
REPRICE_COUNT_NAMES = ("recommended", "no_active_fit")


def worker_name() -> str:
    return f"{socket.gethostname()}:{os.getpid()}"


def normalise_scope(raw: object) -> dict[str, Any]:
    """`"all"`, `{"family": F}` or `{"skus": [...]}` -> a canonical dict, else 422."""
    if raw == "all" or raw == {"all": True}:
        return {"all": True}
    if isinstance(raw, dict) and set(raw) == {"family"} and isinstance(raw["family"], str):
        return {"family": raw["family"]}
    if (
        isinstance(raw, dict)
        and set(raw) == {"skus"}
        and isinstance(raw["skus"], list)
        and raw["skus"]
        and all(isinstance(s, str) and s for s in raw["skus"])
    ):
        return {"skus": sorted(set(raw["skus"]))}
    raise InvalidInput(
        'scope must be "all", {"family": "..."} or {"skus": [...]}',
        errors=[ErrorItem(field="scope", message="not a recognised scope")],
    )


def create(
    session: Session,
    *,
    kind: str,
    scope: object,
    refit_unchanged: bool = False,
    spec: dict[str, Any] | None = None,
    request: dict[str, Any] | None = None,
    schedule_name: str | None = None,
) -> JobRow:
    row = JobRow(
        kind=kind,
        scope=normalise_scope(scope),
        options={"refit_unchanged": refit_unchanged, "spec": spec, "request": request},
        status=QUEUED,
        done=0,
        total=0,
        counts=dict.fromkeys(COUNT_NAMES, 0),
        errors=[],
        schedule_name=schedule_name,
        created_at=utcnow(),
    )
    session.add(row)
    session.flush()
    return row


def get_or_raise(session: Session, *, job_id: int) -> JobRow:
    row = session.get(JobRow, job_id)
    if row is None:
        raise NotFound(f"no job with id {job_id}")
    return row


def list_page(
    session: Session, *, limit: int, before_id: int | None, status: str | None = None
) -> tuple[list[JobRow], bool]:
    query = select(JobRow).order_by(JobRow.id.desc()).limit(limit + 1)
    if before_id is not None:
        query = query.where(JobRow.id < before_id)
    if status is not None:
        query = query.where(JobRow.status == status)
    rows = list(session.scalars(query))
    return rows[:limit], len(rows) > limit


def claim(session: Session, *, job_id: int | None = None, worker: str) -> JobRow | None:
    """Take a queued job (the oldest, or the given one) and mark it running.

    On PostgreSQL, ``FOR UPDATE SKIP LOCKED`` lets several workers claim concurrently;
    SQLite writers are serialised by ``BEGIN IMMEDIATE`` (write sessions).
    """
    query = select(JobRow).where(JobRow.status == QUEUED).order_by(JobRow.id).limit(1)
    if job_id is not None:
        query = query.where(JobRow.id == job_id)
    if session.get_bind().dialect.name == "postgresql":
        query = query.with_for_update(skip_locked=True)
    row = session.scalar(query)
    if row is None:
        return None
    now = utcnow()
    row.status, row.claimed_by, row.started_at, row.heartbeat_at = RUNNING, worker, now, now
    session.flush()
    return row


def recover_interrupted(session: Session, *, stale_after: dt.timedelta) -> list[int]:
    """Mark running jobs whose worker is gone as failed; returns their ids.

    A worker on this host that no longer exists is gone at once; others are gone when
    their heartbeat is older than ``stale_after``. Their products keep whatever the
    last committed batch left: each batch is one transaction.
    """
    host = socket.gethostname()
    now = utcnow()
    lost = []
    for row in session.scalars(select(JobRow).where(JobRow.status == RUNNING)):
        claimed_host, _, pid = (row.claimed_by or "").rpartition(":")
        dead_here = claimed_host == host and pid.isdigit() and not _alive(int(pid))
        heartbeat = row.heartbeat_at
        stale = heartbeat is None or now - as_utc(heartbeat) > stale_after
        if dead_here or stale:
            row.status = FAILED
            row.finished_at = now
            row.message = (
                f"interrupted: worker {row.claimed_by} stopped after {row.done} of "
                f"{row.total} products; finished batches were kept, the rest untouched"
            )
            lost.append(row.id)
    session.flush()
    return lost


def _alive(pid: int) -> bool:
    if pid == os.getpid():
        return True
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


@dataclass
class Progress:
    """What a running job has done so far; written with each batch."""

    total: int = 0
    done: int = 0
    counts: dict[str, int] = field(default_factory=lambda: dict.fromkeys(COUNT_NAMES, 0))
    errors: list[dict[str, Any]] = field(default_factory=list)

    def add_error(self, sku: str, reason: str) -> None:
        if len(self.errors) < MAX_STORED_ERRORS:
            self.errors.append({"sku": sku, "reason": reason})


ProgressCallback = Callable[[Progress], None]


def save_progress(session: Session, *, job_id: int, progress: Progress) -> None:
    session.execute(
        update(JobRow)
        .where(JobRow.id == job_id)
        .values(
            total=progress.total,
            done=progress.done,
            counts=dict(progress.counts),
            errors=list(progress.errors),
            heartbeat_at=utcnow(),
        )
    )


def finish(
    factory: sessionmaker[Session], *, job_id: int, status: str, message: str | None = None
) -> None:
    with session_scope(factory) as session:
        session.execute(
            update(JobRow)
            .where(JobRow.id == job_id)
            .values(status=status, finished_at=utcnow(), message=message)
        )


def scope_filter(scope: dict[str, Any]) -> Any:
    """The products a job's scope covers, as a condition on the products table."""
    if "family" in scope:
        return ProductRow.family == scope["family"]
    if "skus" in scope:
        return ProductRow.sku.in_(scope["skus"])
    return True
