"""One partition of a reprice job, on a cluster worker: a recommendation per product.

As in the in-process job (:mod:`service.pricing.reprice`), each product in the
partition's range with an active fit is priced with the job's request, and each batch's
recommendations are stored with the partition's progress in one transaction; a partition
run again after its worker died skips the batches its earlier run committed.
"""

from __future__ import annotations

import time
from collections.abc import Sequence
from typing import Any

from sqlalchemy import insert, select
from sqlalchemy.orm import Session

from service.core.db import session_scope
from service.core.errors import ServiceError, WrongSign, failure_reason, is_outage
from service.core.tables import FitRow, ProductRow, RecommendationRow, utcnow
from service.estimation.fit_cache import fit_cache
from service.estimation.gates import ACTIVE
from service.jobs import partitions
from service.jobs import queue as jobs
from service.pricing.recommendations import price_product
from service.pricing.schemas import OptimalPriceRequest


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
        request = OptimalPriceRequest.model_validate((job.options or {}).get("request") or {})
        rows = session.execute(
            select(ProductRow, FitRow.id, FitRow.created_at)
            .outerjoin(FitRow, (FitRow.product_id == ProductRow.id) & (FitRow.status == ACTIVE))
            .where(jobs.scope_filter(job.scope))
            .where(ProductRow.id.between(task.first_id, task.last_id))
            .order_by(ProductRow.sku)
        ).all()
        products = [(row[0], row[1], row[2]) for row in rows]
        for product, _, _ in products:
            session.expunge(product)
    if claimed.batches_done == 0:
        progress = jobs.Progress(total=len(products))
        progress.counts["recommended"] = 0
    else:
        progress = claimed.progress
    size = settings.job_batch_size
    clock = {"read": 0.0, "fit": 0.0, "write": 0.0}
    done = 0
    for number in range(claimed.batches_done, -(-len(products) // size)):
        batch = products[number * size : (number + 1) * size]
        started = time.perf_counter()
        with session_scope(reads) as session:
            records = _price(session, batch, request, task.job_id, progress)
        written = time.perf_counter()
        with session_scope(writes) as session:
            if records:
                session.execute(insert(RecommendationRow), records)
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


def _price(
    session: Session,
    batch: Sequence[tuple[ProductRow, int | None, Any]],
    request: OptimalPriceRequest,
    job_id: int,
    progress: jobs.Progress,
) -> list[dict[str, Any]]:
    """A batch's recommendations to store; the others counted as skipped or failed."""
    records: list[dict[str, Any]] = []
    for product, fit_id, created_at in batch:
        if fit_id is None:
            progress.counts["skipped"] += 1
            progress.add_error(product.sku, "skipped: no active fit")
            continue
        try:
            fit = fit_cache.get(session, fit_id, created_at)
            scenario = {k: v for k, v in request.scenario.items() if k in fit.variable_means}
            record = price_product(fit, product, request, scenario=scenario).to_dict()
        except WrongSign as exc:
            progress.counts["failed"] += 1
            progress.add_error(product.sku, f"refused: {exc.reason}")
            continue
        except ServiceError as exc:
            progress.counts["failed"] += 1
            progress.add_error(product.sku, exc.detail)
            continue
        except Exception as exc:  # a stored value that cannot be used: this product only
            if is_outage(exc):
                raise
            progress.counts["failed"] += 1
            progress.add_error(product.sku, failure_reason(exc))
            continue
        progress.counts["recommended"] += 1
        records.append(
            {
                "product_id": product.id,
                "fit_id": fit_id,
                "objective": request.objective,
                "request": {"job_id": job_id, **request.model_dump()},
                "result": record,
                "created_at": utcnow(),
            }
        )
    return records
