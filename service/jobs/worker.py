"""Running jobs: one to completion (the CLI, tests) or a polling worker.

The worker runs inside the service process, or alone as `marginal worker`.
"""

from __future__ import annotations

import datetime as dt
import logging
import threading
import time
from collections.abc import Callable

from sqlalchemy import Engine

from service.core import metrics
from service.core.db import make_session_factory, session_scope
from service.core.errors import failure_reason
from service.core.settings import Settings
from service.estimation.refit import run_refit
from service.jobs import queue as jobs
from service.jobs.cluster import run_on_cluster
from service.jobs.partitions import PartitionReport
from service.pricing.reprice import run_reprice

logger = logging.getLogger("marginal.jobs")


class JobRunner:
    """Runs claimed jobs against one database."""

    def __init__(self, engine: Engine, settings: Settings) -> None:
        self.settings = settings
        self.reads = make_session_factory(engine, writer=False)
        self.writes = make_session_factory(engine, writer=True)
        # What the workers of the last cluster job reported (time, memory), for benchmarks.
        self.cluster_reports: list[PartitionReport] = []

    def claim(self, job_id: int | None = None) -> int | None:
        with session_scope(self.writes) as session:
            row = jobs.claim(session, job_id=job_id, worker=jobs.worker_name())
            return row.id if row else None

    def recover(self, stale_after: dt.timedelta) -> list[int]:
        with session_scope(self.writes) as session:
            lost = jobs.recover_interrupted(session, stale_after=stale_after)
        for job_id in lost:
            logger.warning("job %s was interrupted and is marked failed", job_id)
        return lost

    def run(
        self,
        job_id: int,
        on_progress: jobs.ProgressCallback | None = None,
        announce: Callable[[str], None] | None = None,
    ) -> str:
        """Run a claimed job to the end, here or on the cluster of the settings; returns
        its final status. ``announce`` is told where a cluster job runs (its dashboard)."""
        with session_scope(self.reads) as session:
            kind = jobs.get_or_raise(session, job_id=job_id).kind
        started = time.perf_counter()
        logger.info("job %s (%s) started", job_id, kind)
        try:
            if self.settings.cluster:
                run = run_on_cluster(
                    (self.reads, self.writes),
                    job_id=job_id,
                    settings=self.settings,
                    on_progress=on_progress,
                    announce=announce,
                )
                progress, self.cluster_reports = run.progress, run.reports
            elif kind == "refit":
                progress = run_refit(
                    (self.reads, self.writes),
                    job_id=job_id,
                    settings=self.settings,
                    on_progress=on_progress,
                )
            elif kind == "reprice":
                progress = run_reprice(
                    (self.reads, self.writes),
                    job_id=job_id,
                    settings=self.settings,
                    on_progress=on_progress,
                )
            else:
                raise ValueError(f"unknown job kind {kind!r}")
        except Exception as exc:  # the job fails; the worker lives on
            logger.exception("job %s failed", job_id)
            jobs.finish(
                self.writes,
                job_id=job_id,
                status=jobs.FAILED,
                message=failure_reason(exc)[:500],
            )
            metrics.record_job(kind, jobs.FAILED, time.perf_counter() - started, None)
            return jobs.FAILED
        jobs.finish(self.writes, job_id=job_id, status=jobs.SUCCEEDED)
        metrics.record_job(kind, jobs.SUCCEEDED, time.perf_counter() - started, progress.counts)
        logger.info("job %s (%s) succeeded: %s", job_id, kind, progress.counts)
        return jobs.SUCCEEDED


class Worker(threading.Thread):
    """Polls for queued jobs and runs them one at a time until stopped."""

    def __init__(self, runner: JobRunner, *, poll_seconds: float) -> None:
        super().__init__(name="marginal-worker", daemon=True)
        self.runner = runner
        self.poll_seconds = poll_seconds
        self.stopping = threading.Event()

    def run(self) -> None:
        while not self.stopping.is_set():
            try:
                job_id = self.runner.claim()
                if job_id is not None:
                    self.runner.run(job_id)
                    continue
            except Exception:  # the database may be away for a while; keep polling
                logger.exception("worker could not claim a job")
            self.stopping.wait(self.poll_seconds)

    def stop(self, timeout: float = 30.0) -> None:
        self.stopping.set()
        self.join(timeout)
