"""Running a refit or reprice job on a Dask cluster, one partition a task.

Where a job runs is ``MARGINAL_CLUSTER`` (or ``--cluster``): empty runs it in this
process (:mod:`service.jobs.worker`); ``tcp://HOST:PORT`` sends its partitions to that
Dask scheduler's workers; ``local:N`` starts N worker processes on this machine for the
job's lifetime. Workers need only the package and ``MARGINAL_DATABASE_URL``: a task
carries the job's id, a range of product ids and a few settings, and each partition
reads and writes the database itself (:mod:`service.jobs.partitions`).

Failures: a partition that raises is run again up to ``MARGINAL_CLUSTER_RETRIES`` times
(Dask's ``retries``); one whose worker died is run again by the scheduler on another
worker (up to its ``allowed-failures``). Either way it resumes after its last committed
batch. A scheduler that cannot be reached fails the job with a message saying so.
SQLite stays on one machine: a cluster job on SQLite is refused.
"""

from __future__ import annotations

import logging
import time
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

from sqlalchemy.orm import Session, sessionmaker

from service.core.db import session_scope
from service.core.errors import ClusterUnavailable, ServiceError
from service.core.settings import Settings
from service.estimation.refit_partition import refit_partition
from service.jobs import partitions
from service.jobs import queue as jobs
from service.pricing.reprice_partition import reprice_partition

if TYPE_CHECKING:
    from distributed import Client, Future

logger = logging.getLogger("marginal.cluster")
POLL_SECONDS = 0.25

SQLITE_REFUSED = (
    "a cluster job needs PostgreSQL: SQLite stays on one machine. Run the job in this "
    "process (leave MARGINAL_CLUSTER empty, no --cluster) or move the catalogue to PostgreSQL"
)


class PartitionsFailed(ServiceError):
    """Some partitions of a cluster job failed after their retries."""


@dataclass
class ClusterRun:
    """A finished cluster job: its progress and what each partition's worker reported."""

    progress: jobs.Progress
    reports: list[partitions.PartitionReport] = field(default_factory=list)
    workers: int = 0


def check_database(settings: Settings) -> None:
    if settings.is_sqlite:
        raise ClusterUnavailable(SQLITE_REFUSED)


@contextmanager
def connect(address: str, settings: Settings) -> Iterator[Client]:
    """A client of the scheduler at ``address``, or of a local cluster started here."""
    from distributed import Client, LocalCluster

    if address.startswith("local:"):
        cluster = LocalCluster(
            n_workers=int(address.removeprefix("local:")),
            threads_per_worker=1,
            processes=True,
            host="127.0.0.1",
            # Any free port: several jobs (and developers) may run on one machine.
            dashboard_address="127.0.0.1:0",
        )
        try:
            with Client(cluster) as client:
                yield client
        finally:
            cluster.close()
        return
    try:
        client = Client(address, timeout=settings.cluster_connect_seconds)
    except (OSError, TimeoutError) as exc:
        raise ClusterUnavailable(
            f"the Dask scheduler at {address} cannot be reached "
            f"(waited {settings.cluster_connect_seconds:g} s: {exc})"
        ) from exc
    with client:
        yield client


def run_on_cluster(
    factories: tuple[sessionmaker[Session], sessionmaker[Session]],
    *,
    job_id: int,
    settings: Settings,
    on_progress: jobs.ProgressCallback | None = None,
    announce: Callable[[str], None] | None = None,
) -> ClusterRun:
    """Plan the job's partitions, run them on the cluster and sum their progress into
    the job's row as they go."""
    check_database(settings)
    reads, writes = factories
    base = jobs.Progress()
    with session_scope(writes) as session:
        job = jobs.get_or_raise(session, job_id=job_id)
        kind = job.kind
        found = set(partitions.known_skus(session, job=job))
        for sku in job.scope.get("skus", []):
            if sku not in found:
                base.total += 1
                base.done += 1
                base.counts["failed"] += 1
                base.add_error(sku, "no such product")
        if kind == "reprice":
            base.counts.update(dict.fromkeys(jobs.REPRICE_COUNT_NAMES, 0))
        ranges = partitions.plan(session, job=job, size=settings.job_partition_size)
        partitions.create(session, job_id=job_id, ranges=ranges)

    def publish() -> jobs.Progress:
        with session_scope(writes) as session:
            progress = partitions.summary(session, job_id=job_id, base=base)
            jobs.save_progress(session, job_id=job_id, progress=progress)
        if on_progress:
            on_progress(progress)
        return progress

    publish()
    local = settings.cluster.startswith("local:")
    run = refit_partition if kind == "refit" else reprice_partition
    with connect(settings.cluster, settings) as client:
        workers = len(client.scheduler_info().get("workers", {}))
        logger.info("job %s on %s: dashboard %s", job_id, settings.cluster, client.dashboard_link)
        if announce:
            announce(
                f"on the cluster {settings.cluster} ({workers} workers), partitions: "
                f"{len(ranges)}; Dask dashboard: {client.dashboard_link}"
            )
        tasks = [
            partitions.PartitionTask(
                job_id, number, first, last, partitions.task_settings(settings, local=local)
            )
            for number, (first, last, _) in enumerate(ranges)
        ]
        futures = [
            client.submit(
                run,
                task,
                key=f"marginal-{kind}-job-{job_id}-partition-{task.number}",
                retries=settings.cluster_retries,
                pure=False,
            )
            for task in tasks
        ]
        while not all(f.done() for f in futures):
            time.sleep(POLL_SECONDS)
            publish()
        reports, failed = [], []
        for task, future in zip(tasks, futures, strict=True):
            if future.status == "finished":
                reports.append(future.result())
                continue
            reason = _reason(future)
            failed.append(f"partition {task.number} (ids {task.first_id}-{task.last_id}): {reason}")
            with session_scope(writes) as session:
                partitions.finish(
                    session,
                    job_id=job_id,
                    number=task.number,
                    status=jobs.FAILED,
                    message=reason[:500],
                )
    progress = publish()
    if failed:
        raise PartitionsFailed(
            f"{len(failed)} of {len(tasks)} partitions failed after retries; " + "; ".join(failed)
        )
    return ClusterRun(progress, reports, workers)


def _reason(future: Future[partitions.PartitionReport]) -> str:
    """Why a partition's task ended without a result, in a sentence."""
    if future.status == "cancelled":
        return "the cluster lost the task (was its scheduler stopped?)"
    exception = future.exception()
    if isinstance(exception, ServiceError):
        return exception.detail
    return f"{type(exception).__name__}: {exception}"[:300]
