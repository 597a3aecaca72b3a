"""Batch jobs (refit, reprice) and their cron schedules."""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Path, Query, Response, status

from service.core.deps import ADMIN, READ, WRITE, ReadSession, WriteSession
from service.core.pagination import MAX_ID, cursor_int, decode_cursor, encode_cursor
from service.core.responses import problems
from service.core.schemas import Page
from service.core.tables import ScheduleRow, utcnow
from service.jobs import queue as jobs
from service.jobs import schedules, submit
from service.jobs.schemas import (
    JobIn,
    JobOut,
    JobStatus,
    ScheduleIn,
    ScheduleOut,
    job_out,
    schedule_out,
)

router = APIRouter(tags=["jobs"])
NamePath = Annotated[str, Path(pattern=r"^[A-Za-z0-9][A-Za-z0-9._-]{0,63}$")]


@router.post(
    "/v1/jobs",
    response_model=JobOut,
    status_code=status.HTTP_202_ACCEPTED,
    dependencies=[WRITE],
    operation_id="create_job",
    summary="Queue a refit or reprice of all products, a family or a list of skus",
    responses=problems(422),
)
def create_job(body: JobIn, session: WriteSession) -> JobOut:
    """The job runs in the background (the service's worker or `marginal worker`); poll
    `GET /v1/jobs/{id}` for its progress."""
    scope = body.scope if isinstance(body.scope, str) else body.scope.model_dump()
    row = submit.submit(
        session,
        kind=body.kind,
        scope=scope,
        refit_unchanged=body.refit_unchanged,
        spec=body.spec,
        request=body.request,
    )
    return job_out(row)


@router.get(
    "/v1/jobs/{job_id}",
    response_model=JobOut,
    dependencies=[READ],
    operation_id="get_job",
    summary="A job's status, progress, counts and per-product errors",
    responses=problems(404, 422),
)
def get_job(job_id: Annotated[int, Path(ge=1, le=MAX_ID)], session: ReadSession) -> JobOut:
    return job_out(jobs.get_or_raise(session, job_id=job_id))


@router.get(
    "/v1/jobs",
    response_model=Page[JobOut],
    dependencies=[READ],
    operation_id="list_jobs",
    summary="Recent jobs, newest first",
    responses=problems(422),
)
def list_jobs(
    session: ReadSession,
    status_filter: Annotated[JobStatus | None, Query(alias="status")] = None,
    limit: Annotated[int, Query(ge=1, le=200)] = 50,
    cursor: Annotated[
        str | None, Query(description="From `next_cursor` of the previous page")
    ] = None,
) -> Page[JobOut]:
    position = decode_cursor(cursor)
    before = cursor_int(position, "before")
    rows, more = jobs.list_page(session, limit=limit, before_id=before, status=status_filter)
    next_cursor = encode_cursor({"before": rows[-1].id}) if more and rows else None
    return Page[JobOut](items=[job_out(r) for r in rows], next_cursor=next_cursor)


def check_job_options(body: JobIn, prefix: str = "") -> None:
    """A job's options, checked before it is queued or scheduled."""
    submit.check_options(
        kind=body.kind,
        refit_unchanged=body.refit_unchanged,
        spec=body.spec,
        request=body.request,
        prefix=prefix,
    )


def _schedule_out(session: ReadSession | WriteSession, row: ScheduleRow) -> ScheduleOut:
    next_run = schedules.next_slot(row, utcnow()) if row.enabled else None
    return schedule_out(row, schedules.last_run(session, name=row.name), next_run)


@router.get(
    "/v1/schedules",
    response_model=Page[ScheduleOut],
    dependencies=[ADMIN],
    operation_id="list_schedules",
    summary="Cron schedules of jobs",
    responses=problems(),
)
def list_schedules(session: ReadSession) -> Page[ScheduleOut]:
    rows = schedules.list_all(session)
    return Page[ScheduleOut](items=[_schedule_out(session, r) for r in rows], next_cursor=None)


@router.get(
    "/v1/schedules/{name}",
    response_model=ScheduleOut,
    dependencies=[ADMIN],
    operation_id="get_schedule",
    summary="One schedule",
    responses=problems(404, 422),
)
def get_schedule(name: NamePath, session: ReadSession) -> ScheduleOut:
    return _schedule_out(session, schedules.get_or_raise(session, name=name))


@router.put(
    "/v1/schedules/{name}",
    response_model=ScheduleOut,
    dependencies=[ADMIN],
    operation_id="put_schedule",
    summary="Create or replace a schedule",
    responses={201: {"model": ScheduleOut, "description": "Created"}, **problems(422)},
)
def put_schedule(
    name: NamePath, body: ScheduleIn, session: WriteSession, response: Response
) -> ScheduleOut:
    """Each cron slot starts one job, however many replicas run. A slot missed while no
    service was running is run once at the next start (only the most recent one)."""
    check_job_options(body.job, prefix="job.")
    fields = body.model_dump()
    fields["job"] = body.job.model_dump(exclude_none=True)
    row, created = schedules.put(session, name=name, fields=fields)
    if created:
        response.status_code = status.HTTP_201_CREATED
    return _schedule_out(session, row)


@router.delete(
    "/v1/schedules/{name}",
    status_code=status.HTTP_204_NO_CONTENT,
    dependencies=[ADMIN],
    operation_id="delete_schedule",
    summary="Delete a schedule",
    responses=problems(404, 422),
)
def delete_schedule(name: NamePath, session: WriteSession) -> Response:
    schedules.delete(session, name=name)
    return Response(status_code=status.HTTP_204_NO_CONTENT)
