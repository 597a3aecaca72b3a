"""A job's partitions on a cluster: ranges of product ids, each with its state and progress.

The job that runs on a cluster plans its partitions (:func:`plan`, :func:`create`) and
sends each worker a :class:`PartitionTask`: the job's id, the partition's number and the
settings the work depends on, never product data. A worker claims its partition
(:func:`begin`), and every batch it commits updates the partition's row in the same
transaction (:func:`save`), so a partition run again after its worker died resumes after
the last committed batch: nothing is lost and nothing is written twice. The job's row
shows the sum of its partitions (:func:`summary`), as for a job run in one process.
"""

from __future__ import annotations

import resource
import sys
import threading
from dataclasses import dataclass, field
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session, sessionmaker

from service.core.db import make_engine, make_session_factory, session_scope
from service.core.errors import ClusterUnavailable, Conflict
from service.core.settings import Settings
from service.core.tables import JobPartitionRow, JobRow, ProductRow, utcnow
from service.jobs import queue as jobs

# The settings a partition's work depends on; the database's address is the worker's own
# (MARGINAL_DATABASE_URL) unless the cluster was started here for the job.
TASK_SETTINGS = (
    "database_schema",
    "job_batch_size",
    "gate_min_observations",
    "gate_holdout_margin",
)


class PartitionTaken(Conflict):
    """Another run of the same partition committed a batch first; this run stops."""


@dataclass(frozen=True)
class PartitionTask:
    """What travels to a worker: ids and settings, never histories or fits."""

    job_id: int
    number: int
    first_id: int
    last_id: int
    settings: dict[str, Any]


@dataclass(frozen=True)
class PartitionReport:
    """What a worker says back: where the partition ran, its time and its memory."""

    number: int
    worker: str
    products: int
    read_seconds: float = 0.0
    fit_seconds: float = 0.0
    write_seconds: float = 0.0
    peak_memory_bytes: int = 0


@dataclass
class Claimed:
    """A partition taken by this run: the batches already committed and their progress."""

    batches_done: int
    progress: jobs.Progress = field(default_factory=jobs.Progress)


@dataclass(frozen=True)
class PartitionRun:
    """One run of a partition on this worker, from its claim to its report: what the refit
    and reprice runners share, so that each holds only its own batch work."""

    task: PartitionTask
    settings: Settings
    reads: sessionmaker[Session]
    writes: sessionmaker[Session]
    worker: str
    claimed: Claimed | None
    """None: the partition had succeeded already and there is nothing to run."""

    @classmethod
    def start(cls, task: PartitionTask) -> PartitionRun:
        """The worker's settings and sessions for ``task``, and the partition claimed."""
        settings = worker_settings(task.settings)
        reads, writes = worker_factories(settings)
        worker = jobs.worker_name()
        with session_scope(writes) as session:
            claimed = begin(session, job_id=task.job_id, number=task.number, worker=worker)
        return cls(task, settings, reads, writes, worker, claimed)

    @property
    def batches_done(self) -> int:
        return 0 if self.claimed is None else self.claimed.batches_done

    def progress(self, fresh: jobs.Progress) -> jobs.Progress:
        """``fresh`` on a first run; on a run again, the progress its batches committed."""
        return fresh if self.claimed is None or self.batches_done == 0 else self.claimed.progress

    def save(self, session: Session, *, number: int, progress: jobs.Progress) -> None:
        """Batch ``number`` committed, in the batch's transaction (see :func:`save`)."""
        save(
            session,
            job_id=self.task.job_id,
            number=self.task.number,
            batches_done=number,
            progress=progress,
        )

    def succeed(self, progress: jobs.Progress) -> None:
        with session_scope(self.writes) as session:
            finish(
                session,
                job_id=self.task.job_id,
                number=self.task.number,
                status=jobs.SUCCEEDED,
                progress=progress,
            )

    def report(self, products: int, **seconds: float) -> PartitionReport:
        """What the worker says back: ``seconds`` by ``read_seconds``, ``fit_seconds`` and
        ``write_seconds``."""
        return PartitionReport(
            self.task.number,
            self.worker,
            products,
            peak_memory_bytes=0 if self.claimed is None else peak_memory_bytes(),
            **seconds,
        )


def task_settings(settings: Settings, *, local: bool) -> dict[str, Any]:
    fields = {name: getattr(settings, name) for name in TASK_SETTINGS}
    if local:
        fields["database_url"] = settings.database_url
    return fields


def worker_settings(fields: dict[str, Any]) -> Settings:
    """The settings a partition runs with: the worker's environment, then the job's."""
    settings = Settings().model_copy(update=fields)
    if settings.is_sqlite:
        raise ClusterUnavailable(
            "this cluster worker has no PostgreSQL database: set MARGINAL_DATABASE_URL in "
            "the worker's environment to the database of the job"
        )
    return settings


_factories: dict[tuple[str, str | None], tuple[sessionmaker[Session], sessionmaker[Session]]] = {}
_factories_lock = threading.Lock()


def worker_factories(settings: Settings) -> tuple[sessionmaker[Session], sessionmaker[Session]]:
    """Read and write session factories, one engine per database for the worker process."""
    key = (settings.database_url, settings.database_schema)
    with _factories_lock:
        if key not in _factories:
            engine = make_engine(settings)
            _factories[key] = (
                make_session_factory(engine, writer=False),
                make_session_factory(engine, writer=True),
            )
        return _factories[key]


def peak_memory_bytes() -> int:
    """This process's peak resident memory so far."""
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    return int(peak if sys.platform == "darwin" else peak * 1024)


# -- planning, on the job's side -------------------------------------------------------


def plan(session: Session, *, job: JobRow, size: int) -> list[tuple[int, int, int]]:
    """The job's products in ranges of ``size`` ids: (first id, last id, products)."""
    ids = list(
        session.scalars(
            select(ProductRow.id).where(jobs.scope_filter(job.scope)).order_by(ProductRow.id)
        )
    )
    return [
        (chunk[0], chunk[-1], len(chunk))
        for chunk in (ids[i : i + size] for i in range(0, len(ids), size))
    ]


def known_skus(session: Session, *, job: JobRow) -> list[str]:
    """The skus a job names that exist (for a job over a list of skus)."""
    if "skus" not in job.scope:
        return []
    return list(session.scalars(select(ProductRow.sku).where(jobs.scope_filter(job.scope))))


def create(session: Session, *, job_id: int, ranges: list[tuple[int, int, int]]) -> None:
    for number, (first, last, count) in enumerate(ranges):
        session.add(
            JobPartitionRow(
                job_id=job_id,
                number=number,
                first_id=first,
                last_id=last,
                status=jobs.QUEUED,
                attempts=0,
                batches_done=0,
                done=0,
                total=count,
                counts=dict.fromkeys(jobs.COUNT_NAMES, 0),
                errors=[],
                updated_at=utcnow(),
            )
        )
    session.flush()


def rows(session: Session, *, job_id: int) -> list[JobPartitionRow]:
    return list(
        session.scalars(
            select(JobPartitionRow)
            .where(JobPartitionRow.job_id == job_id)
            .order_by(JobPartitionRow.number)
        )
    )


def summary(session: Session, *, job_id: int, base: jobs.Progress) -> jobs.Progress:
    """The job's progress: ``base`` (what the job counted itself) plus its partitions."""
    total = jobs.Progress(
        total=base.total, done=base.done, counts=dict(base.counts), errors=list(base.errors)
    )
    for row in rows(session, job_id=job_id):
        total.total += row.total
        total.done += row.done
        for name, n in (row.counts or {}).items():
            total.counts[name] = total.counts.get(name, 0) + n
        for error in row.errors or []:
            total.add_error(error["sku"], error["reason"])
    return total


# -- running, on a worker --------------------------------------------------------------


def _locked(session: Session, job_id: int, number: int) -> JobPartitionRow:
    row = session.scalar(
        select(JobPartitionRow)
        .where(JobPartitionRow.job_id == job_id, JobPartitionRow.number == number)
        .with_for_update()
    )
    if row is None:
        raise PartitionTaken(f"job {job_id} has no partition {number}")
    return row


def begin(session: Session, *, job_id: int, number: int, worker: str) -> Claimed | None:
    """Mark the partition running on ``worker``; None if it has succeeded already."""
    row = _locked(session, job_id, number)
    if row.status == jobs.SUCCEEDED:
        return None
    row.status, row.worker, row.attempts = jobs.RUNNING, worker, row.attempts + 1
    row.updated_at = utcnow()
    progress = jobs.Progress(
        total=row.total,
        done=row.done,
        counts=dict(row.counts or {}),
        errors=list(row.errors or []),
    )
    session.flush()
    return Claimed(row.batches_done, progress)


def save(
    session: Session, *, job_id: int, number: int, batches_done: int, progress: jobs.Progress
) -> None:
    """Record one more committed batch, in the batch's transaction. ``batches_done`` is
    the count this run saw before the batch: if another run moved it on, this one stops
    (its transaction, with the batch's fits, is rolled back)."""
    row = _locked(session, job_id, number)
    if row.batches_done != batches_done:
        raise PartitionTaken(
            f"partition {number} of job {job_id} was moved on by another run "
            f"({row.batches_done} batches, expected {batches_done})"
        )
    row.batches_done = batches_done + 1
    _store(row, progress)


def finish(
    session: Session,
    *,
    job_id: int,
    number: int,
    status: str,
    progress: jobs.Progress | None = None,
    message: str | None = None,
) -> None:
    row = _locked(session, job_id, number)
    row.status, row.message = status, message
    if progress is not None:
        _store(row, progress)
    row.updated_at = utcnow()


def _store(row: JobPartitionRow, progress: jobs.Progress) -> None:
    row.total, row.done = progress.total, progress.done
    row.counts, row.errors = dict(progress.counts), list(progress.errors)
    row.updated_at = utcnow()
