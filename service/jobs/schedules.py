"""Cron schedules for jobs, and the tick that starts each slot exactly once.

Rule for missed runs: every tick (and the first one at start-up) looks at the most
recent slot at or before now. If no run exists for it, it runs now. So a service that
was down over one or more slots runs once when it comes back (for the latest slot
only); slots from before the schedule was created or last changed never run.
Exactly once: the run is a row keyed on (schedule, slot), inserted in the same
transaction as its job; a second scheduler racing for the slot hits the unique key
and creates nothing.
"""

from __future__ import annotations

import datetime as dt
import logging
import threading
from typing import Any
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

from croniter import CroniterError, croniter
from sqlalchemy import select
from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import Session, sessionmaker

from service.core.db import session_scope
from service.core.errors import ErrorItem, InvalidInput, NotFound
from service.core.tables import ScheduleRow, ScheduleRunRow, as_utc, utcnow
from service.jobs import queue as jobs

logger = logging.getLogger("marginal.schedules")


CRON_FIELDS = ("minute", "hour", "day of month", "month", "day of week")


def _fires(expression: str) -> bool:
    """Whether the expression names any time at all, before and after now (31 February
    never comes; croniter gives up looking)."""
    start = dt.datetime.now(dt.UTC).replace(tzinfo=None)
    try:
        croniter(expression, start).get_next(dt.datetime)
        croniter(expression, start).get_prev(dt.datetime)
    except (CroniterError, ValueError, OverflowError):
        return False
    return True


def check_cron(expression: str, timezone: str) -> None:
    problems = []
    fields = expression.split()
    if len(fields) != len(CRON_FIELDS):
        problems.append(
            ErrorItem(
                field="cron",
                message=f"{expression!r} has {len(fields)} fields; a schedule takes five: "
                + ", ".join(CRON_FIELDS),
            )
        )
    elif not croniter.is_valid(expression):
        problems.append(ErrorItem(field="cron", message=f"{expression!r} is not a cron expression"))
    elif not _fires(expression):
        problems.append(
            ErrorItem(
                field="cron",
                message=f"{expression!r} never fires (no month has such a day, as 31 February)",
            )
        )
    try:
        ZoneInfo(timezone)
    except (ZoneInfoNotFoundError, ValueError):
        problems.append(ErrorItem(field="timezone", message=f"unknown time zone {timezone!r}"))
    if problems:
        raise InvalidInput("the schedule is invalid", errors=problems)


def latest_slot(row: ScheduleRow, now: dt.datetime) -> dt.datetime:
    """The most recent cron time at or before ``now``, in UTC."""
    zone = ZoneInfo(row.timezone)
    local_now = now.astimezone(zone)
    # croniter's get_prev is strictly before its start: start a microsecond later.
    slot = croniter(row.cron, local_now + dt.timedelta(microseconds=1)).get_prev(dt.datetime)
    return slot.astimezone(dt.UTC)


def next_slot(row: ScheduleRow, now: dt.datetime) -> dt.datetime:
    zone = ZoneInfo(row.timezone)
    return croniter(row.cron, now.astimezone(zone)).get_next(dt.datetime).astimezone(dt.UTC)


def put(session: Session, *, name: str, fields: dict[str, Any]) -> tuple[ScheduleRow, bool]:
    check_cron(fields["cron"], fields["timezone"])
    job = fields["job"]
    jobs.normalise_scope(job["scope"])
    row = session.get(ScheduleRow, name)
    created = row is None
    now = utcnow()
    if row is None:
        row = ScheduleRow(name=name, created_at=now)
        session.add(row)
    row.cron, row.timezone, row.job, row.enabled = (
        fields["cron"],
        fields["timezone"],
        job,
        fields["enabled"],
    )
    row.updated_at = now
    session.flush()
    return row, created


def get_or_raise(session: Session, *, name: str) -> ScheduleRow:
    row = session.get(ScheduleRow, name)
    if row is None:
        raise NotFound(f"no schedule named {name!r}")
    return row


def list_all(session: Session) -> list[ScheduleRow]:
    return list(session.scalars(select(ScheduleRow).order_by(ScheduleRow.name)))


def delete(session: Session, *, name: str) -> None:
    session.delete(get_or_raise(session, name=name))


def last_run(session: Session, *, name: str) -> ScheduleRunRow | None:
    return session.scalar(
        select(ScheduleRunRow)
        .where(ScheduleRunRow.schedule_name == name)
        .order_by(ScheduleRunRow.slot.desc())
        .limit(1)
    )


def tick(writes: sessionmaker[Session], *, now: dt.datetime | None = None) -> list[int]:
    """Start every due slot that has not run; returns the ids of the jobs created."""
    now = now or utcnow()
    with session_scope(writes) as session:
        due = [
            (row.name, latest_slot(row, now))
            for row in session.scalars(select(ScheduleRow).where(ScheduleRow.enabled.is_(True)))
            if latest_slot(row, now) >= as_utc(row.updated_at)
        ]
    started = []
    for name, slot in due:
        try:
            with session_scope(writes) as session:
                if session.scalar(
                    select(ScheduleRunRow.id).where(
                        ScheduleRunRow.schedule_name == name, ScheduleRunRow.slot == slot
                    )
                ):
                    continue
                row = session.get(ScheduleRow, name)
                if row is None or not row.enabled:
                    continue
                template = row.job
                job = jobs.create(
                    session,
                    kind=template["kind"],
                    scope=template["scope"],
                    refit_unchanged=bool(template.get("refit_unchanged", False)),
                    spec=template.get("spec"),
                    request=template.get("request"),
                    schedule_name=name,
                )
                session.add(
                    ScheduleRunRow(
                        schedule_name=name, slot=slot, job_id=job.id, created_at=utcnow()
                    )
                )
                session.flush()
                started.append(job.id)
                logger.info(
                    "schedule %s started job %s for slot %s", name, job.id, slot.isoformat()
                )
        except IntegrityError:
            # Another scheduler took this slot first: exactly one run per slot.
            continue
    return started


class Scheduler(threading.Thread):
    """Ticks every few seconds until stopped; any number may run against one database."""

    def __init__(self, writes: sessionmaker[Session], *, tick_seconds: float) -> None:
        super().__init__(name="marginal-scheduler", daemon=True)
        self.writes = writes
        self.tick_seconds = tick_seconds
        self.stopping = threading.Event()

    def run(self) -> None:
        while not self.stopping.is_set():
            try:
                tick(self.writes)
            except Exception:  # the database may be away for a while; keep ticking
                logger.exception("scheduler tick failed")
            self.stopping.wait(self.tick_seconds)

    def stop(self, timeout: float = 10.0) -> None:
        self.stopping.set()
        self.join(timeout)
