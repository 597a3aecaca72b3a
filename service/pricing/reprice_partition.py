"""One partition of a reprice job, on a cluster worker: a recommendation per product.

As in the in-process job (:mod:`service.pricing.reprice`), each product in the
partition's range with an active fit is priced with the job's request, and each batch's
recommendations are stored with the partition's progress in one transaction; a partition
run again after its worker died skips the batches its earlier run committed.
"""

from __future__ import annotations

import time

from service.core.db import session_scope
from service.jobs import partitions
from service.jobs import queue as jobs
from service.pricing import reprice
from service.pricing.recommendations import store_records


def reprice_partition(task: partitions.PartitionTask) -> partitions.PartitionReport:
    """Run one partition of a reprice job to its end; the scheduler calls this on a worker."""
    run = partitions.PartitionRun.start(task)
    if run.claimed is None:
        return run.report(0)
    with session_scope(run.reads) as session:
        job = jobs.get_or_raise(session, job_id=task.job_id)
        request = reprice.job_request(job)
        products = reprice.candidates(session, job=job, id_range=(task.first_id, task.last_id))
    fresh = jobs.Progress(total=len(products))
    fresh.counts.update(dict.fromkeys(jobs.REPRICE_COUNT_NAMES, 0))
    progress = run.progress(fresh)
    size = run.settings.job_batch_size
    clock = {"fit": 0.0, "write": 0.0}
    done = 0
    for number in range(run.batches_done, -(-len(products) // size)):
        batch = products[number * size : (number + 1) * size]
        started = time.perf_counter()
        with session_scope(run.reads) as session:
            records = reprice.price_batch(session, batch, request, task.job_id, progress)
        written = time.perf_counter()
        with session_scope(run.writes) as session:
            store_records(session, records, {p.id: p.sku for p, _, _ in batch})
            progress.done += len(batch)
            run.save(session, number=number, progress=progress)
        clock["fit"] += written - started
        clock["write"] += time.perf_counter() - written
        done += len(batch)
    run.succeed(progress)
    return run.report(done, fit_seconds=clock["fit"], write_seconds=clock["write"])
