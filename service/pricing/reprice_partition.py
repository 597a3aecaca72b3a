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
    settings = partitions.worker_settings(task.settings)
    reads, writes = partitions.worker_factories(settings)
    worker = jobs.worker_name()
    with session_scope(writes) as session:
        claimed = partitions.begin(session, job_id=task.job_id, number=task.number, worker=worker)
    if claimed is None:
        return partitions.PartitionReport(task.number, worker, 0)
    with session_scope(reads) as session:
        job = jobs.get_or_raise(session, job_id=task.job_id)
        request = reprice.job_request(job)
        products = reprice.candidates(session, job=job, id_range=(task.first_id, task.last_id))
    if claimed.batches_done == 0:
        progress = jobs.Progress(total=len(products))
        progress.counts.update(dict.fromkeys(jobs.REPRICE_COUNT_NAMES, 0))
    else:
        progress = claimed.progress
    size = settings.job_batch_size
    clock = {"read": 0.0, "fit": 0.0, "write": 0.0}
    done = 0
    for number in range(claimed.batches_done, -(-len(products) // size)):
        batch = products[number * size : (number + 1) * size]
        started = time.perf_counter()
        with session_scope(reads) as session:
            records = reprice.price_batch(session, batch, request, task.job_id, progress)
        written = time.perf_counter()
        with session_scope(writes) as session:
            store_records(session, records, {p.id: p.sku for p, _, _ in batch})
            progress.done += len(batch)
            partitions.save(
                session,
                job_id=task.job_id,
                number=task.number,
                batches_done=number,
                progress=progress,
            )
        clock["fit"] += written - started
        clock["write"] += time.perf_counter() - written
        done += len(batch)
    with session_scope(writes) as session:
        partitions.finish(
            session,
            job_id=task.job_id,
            number=task.number,
            status=jobs.SUCCEEDED,
            progress=progress,
        )
    return partitions.PartitionReport(
        task.number,
        worker,
        done,
        fit_seconds=clock["fit"],
        write_seconds=clock["write"],
        peak_memory_bytes=partitions.peak_memory_bytes(),
    )
