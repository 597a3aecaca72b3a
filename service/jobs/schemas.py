"""Request and response bodies of jobs and schedules."""

from __future__ import annotations

import datetime as dt
from typing import Annotated, Any, Literal

from pydantic import (
    BaseModel,
    Field,
    StrictBool,
    StringConstraints,
)

from service.core.schemas import Family, Sku, Strict
from service.core.tables import (
    JobRow,
    ScheduleRow,
    ScheduleRunRow,
    as_utc,
    as_utc_or_none,
)

JobKind = Literal["refit", "reprice"]
JobStatus = Literal["queued", "running", "succeeded", "failed", "cancelled"]


class FamilyScope(Strict):
    family: Family


class SkusScope(Strict):
    skus: Annotated[list[Sku], Field(min_length=1, max_length=100_000)]


JobScope = Literal["all"] | FamilyScope | SkusScope


class JobIn(Strict):
    kind: JobKind
    scope: JobScope = Field(
        default="all", description='"all", {"family": "..."} or {"skus": ["...", ...]}'
    )
    refit_unchanged: StrictBool = Field(
        default=False,
        description="refit: also products whose history has not changed since their latest fit "
        "(needed with a spec)",
    )
    spec: dict[str, Any] | None = Field(
        default=None, description="refit: one spec for every product (default: each product's)"
    )
    request: dict[str, Any] | None = Field(
        default=None,
        description="reprice: the optimal-price request body applied to every product",
    )


class JobProgress(BaseModel):
    done: int
    total: int


class JobCounts(BaseModel):
    activated: int = 0
    rejected: int = 0
    awaiting_review: int = Field(
        default=0,
        description="refit: new fits the quality gates left to a person (the spec identifies "
        "the price effect differently from the active fit's)",
    )
    failed: int = 0
    unchanged: int = Field(
        default=0,
        description="refit: products left alone, their history unchanged since their latest fit",
    )
    recommended: int = 0
    no_active_fit: int = Field(
        default=0, description="reprice: products left unpriced, having no active fit"
    )


class JobError(BaseModel):
    sku: str
    reason: str


class JobOut(BaseModel):
    id: int
    kind: JobKind
    scope: Any = Field(description='"all", {"family": "..."} or {"skus": [...]}')
    refit_unchanged: bool
    status: JobStatus
    progress: JobProgress
    counts: JobCounts
    errors: list[JobError]
    message: str | None
    schedule: str | None = Field(description="The schedule that started the job, if any")
    created_at: dt.datetime
    started_at: dt.datetime | None
    finished_at: dt.datetime | None


class ScheduleIn(Strict):
    cron: Annotated[str, StringConstraints(min_length=9, max_length=100)] = Field(
        description="Five-field cron expression (minute, hour, day of month, month, day of "
        "week), e.g. `30 2 * * *` (02:30 every day); one that never fires, such as "
        "`0 0 31 2 *`, is refused"
    )
    timezone: Annotated[str, StringConstraints(min_length=1, max_length=64)] = "UTC"
    job: JobIn
    enabled: StrictBool = True


class ScheduleOut(BaseModel):
    name: str
    cron: str
    timezone: str
    job: JobIn
    enabled: bool
    next_run_at: dt.datetime | None
    last_run_at: dt.datetime | None = Field(description="The slot of the latest run")
    last_job_id: int | None
    created_at: dt.datetime
    updated_at: dt.datetime


# -- rows to responses


def job_out(row: JobRow) -> JobOut:
    scope: Any = "all" if row.scope == {"all": True} else row.scope
    return JobOut(
        id=row.id,
        kind=row.kind,
        scope=scope,
        refit_unchanged=bool((row.options or {}).get("refit_unchanged")),
        status=row.status,
        progress=JobProgress(done=row.done, total=row.total),
        counts=JobCounts(**(row.counts or {})),
        errors=[JobError(**e) for e in (row.errors or [])],
        message=row.message,
        schedule=row.schedule_name,
        created_at=as_utc(row.created_at),
        started_at=as_utc_or_none(row.started_at),
        finished_at=as_utc_or_none(row.finished_at),
    )


def schedule_out(
    row: ScheduleRow, last: ScheduleRunRow | None, next_run: dt.datetime | None
) -> ScheduleOut:
    return ScheduleOut(
        name=row.name,
        cron=row.cron,
        timezone=row.timezone,
        job=JobIn.model_validate(row.job),
        enabled=row.enabled,
        next_run_at=next_run,
        last_run_at=as_utc_or_none(last.slot) if last else None,
        last_job_id=last.job_id if last else None,
        created_at=as_utc(row.created_at),
        updated_at=as_utc(row.updated_at),
    )
