"""One partition of a refit job, on a cluster worker: its products read, fitted and written.

The work of a batch is the in-process job's (:mod:`service.estimation.refit`): the same
candidates, batches, reads, guarded fits and activation. What differs is the progress,
which goes to the partition's row in each batch's transaction
(:func:`service.jobs.partitions.save`), and the start: a partition run again after its
worker died skips the batches its earlier run committed.
"""

from __future__ import annotations

import time
from collections import deque
from collections.abc import Sequence

from sqlalchemy.orm import Session, sessionmaker

from models import DemandFit, FitFailure, History
from service.catalogue.ingest import cyclic_gc_paused
from service.core.db import session_scope
from service.estimation import fit_store
from service.estimation.batch_reads import Task, lane, read_batch
from service.estimation.refit import (
    earlier,
    encode_guarded,
    fit_guarded,
    read_guarded,
    select_candidates,
)
from service.estimation.refit_batches import Batch, Candidate, make_batches
from service.jobs import partitions
from service.jobs import queue as jobs


class _Clock:
    """Seconds spent reading, fitting and writing, summed over a partition's batches."""

    def __init__(self) -> None:
        self.read = self.fit = self.write = 0.0


def refit_partition(task: partitions.PartitionTask) -> partitions.PartitionReport:
    """Run one partition of a refit job to its end; the scheduler calls this on a worker."""
    run = partitions.PartitionRun.start(task)
    if run.claimed is None:
        return run.report(0)
    fresh = jobs.Progress()
    with session_scope(run.reads) as session:
        job = jobs.get_or_raise(session, job_id=task.job_id)
        candidates = select_candidates(
            session, job=job, progress=fresh, within=(task.first_id, task.last_id)
        )
    progress = run.progress(fresh)
    batches = make_batches(candidates, run.settings.job_batch_size)[run.batches_done :]
    clock = _Clock()
    _run_batches(run, batches=batches, progress=progress, clock=clock)
    run.succeed(progress)
    return run.report(
        sum(len(b.members) for b in batches),
        read_seconds=clock.read,
        fit_seconds=clock.fit,
        write_seconds=clock.write,
    )


def _timed_read(reads: sessionmaker[Session], batch: Batch, clock: _Clock) -> list[History]:
    started = time.perf_counter()
    try:
        return read_batch(reads, batch)
    finally:
        clock.read += time.perf_counter() - started


def _run_batches(
    run: partitions.PartitionRun,
    *,
    batches: Sequence[Batch],
    progress: jobs.Progress,
    clock: _Clock,
) -> None:
    """Batches in order: the next read in a thread while this one fits, the last
    written in a thread while this one fits, as in the in-process job."""
    reads = run.reads
    fitted = [b for b in batches if b.spec is not None]
    with (
        lane(True, "marginal-partition-read") as reader,
        lane(True, "marginal-partition-write") as writer,
    ):
        upcoming = iter(fitted)

        def read_next() -> Task[list[History]] | None:
            batch = next(upcoming, None)
            return None if batch is None else reader(_timed_read, reads, batch, clock)

        reading = deque([read_next()])
        writing: Task[None] | None = None
        for number, batch in enumerate(batches, start=run.batches_done):
            results: Sequence[DemandFit | FitFailure] = []
            texts: Sequence[str | None] = []
            if batch.spec is not None:
                task_read = reading.popleft()
                assert task_read is not None
                histories, unread = read_guarded(reads, batch, task_read)
                reading.append(read_next())
                families = {c.sku: c.family or "" for c in batch.members}
                started = time.perf_counter()
                with cyclic_gc_paused():
                    fits = iter(
                        fit_guarded(
                            histories, batch.spec, families=families, previous_forms=earlier(batch)
                        )
                    )
                    results = [unread.get(c.sku) or next(fits) for c in batch.members]
                    results, texts = encode_guarded(results)
                clock.fit += time.perf_counter() - started
                del histories
            if writing is not None:
                writing.result()
            writing = writer(
                _write,
                run,
                number=number,
                batch=batch,
                results=results,
                texts=texts,
                progress=progress,
                clock=clock,
            )
        if writing is not None:
            writing.result()


def _write(
    run: partitions.PartitionRun,
    *,
    number: int,
    batch: Batch,
    results: Sequence[DemandFit | FitFailure],
    texts: Sequence[str | None],
    progress: jobs.Progress,
    clock: _Clock,
) -> None:
    """A batch's fits and the partition's progress, in one transaction."""
    started = time.perf_counter()
    members: Sequence[Candidate] = batch.members
    with cyclic_gc_paused(), session_scope(run.writes) as session:
        if batch.spec is None:
            for member in members:
                progress.add_error(member.sku, f"invalid spec: {batch.invalid}")
            progress.counts["failed"] += len(members)
        else:
            outcomes = fit_store.activate(
                session,
                targets=[fit_store.FitTarget(c.id, c.sku) for c in members],
                results=results,
                texts=texts,
                settings=run.settings,
                job_id=run.task.job_id,
            )
            for outcome in outcomes:
                progress.counts[outcome.outcome] += 1
                if outcome.reason:
                    progress.add_error(outcome.sku, outcome.reason)
        progress.done += len(members)
        run.save(session, number=number, progress=progress)
    clock.write += time.perf_counter() - started
