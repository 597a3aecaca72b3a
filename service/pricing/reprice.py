"""The reprice job: one stored recommendation per product with an active fit in scope."""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session, sessionmaker

from service.core.db import session_scope
from service.core.errors import ServiceError, WrongSign, failure_reason, is_outage
from service.core.settings import Settings
from service.core.tables import FitRow, JobRow, ProductRow, utcnow
from service.estimation.fit_cache import fit_cache
from service.estimation.gates import ACTIVE
from service.jobs import queue as jobs
from service.pricing import price_record, rule_limits, rules
from service.pricing.recommendations import (
    current_price,
    move_spread_for,
    price_product,
    store_records,
)
from service.pricing.schemas import OptimalPriceRequest


def run_reprice(
    factories: tuple[sessionmaker[Session], sessionmaker[Session]],
    *,
    job_id: int,
    settings: Settings,
    on_progress: jobs.ProgressCallback | None = None,
) -> jobs.Progress:
    reads, writes = factories
    progress = jobs.Progress()
    progress.counts.update(dict.fromkeys(jobs.REPRICE_COUNT_NAMES, 0))
    with session_scope(reads) as session:
        job = jobs.get_or_raise(session, job_id=job_id)
        request = job_request(job)
        products = candidates(session, job=job)
    found = {p.sku for p, _, _ in products}
    for sku in job.scope.get("skus", []):
        if sku not in found:
            progress.total += 1
            progress.done += 1
            progress.counts["failed"] += 1
            progress.add_error(sku, "no such product")
    progress.total += len(products)
    size = settings.job_batch_size
    for start in range(0, len(products), size):
        batch = products[start : start + size]
        with session_scope(reads) as session:
            records = price_batch(session, batch, request, job_id, progress)
        with session_scope(writes) as session:
            store_records(session, records, {p.id: p.sku for p, _, _ in batch})
            progress.done += len(batch)
            jobs.save_progress(session, job_id=job_id, progress=progress)
        if on_progress:
            on_progress(progress)
    return progress


Candidate = tuple[ProductRow, int | None, Any]
"""A product in a reprice job's scope, its active fit's id and creation time (or None)."""


def job_request(job: JobRow) -> OptimalPriceRequest:
    """The request a reprice job prices every product with (checked when it was queued)."""
    return OptimalPriceRequest.model_validate((job.options or {}).get("request") or {})


def candidates(
    session: Session, *, job: JobRow, id_range: tuple[int, int] | None = None
) -> list[Candidate]:
    """The products in the job's scope (within ``id_range`` for a partition), by sku,
    detached from the session, with their active fit's id and creation time."""
    query = (
        select(ProductRow, FitRow.id, FitRow.created_at)
        .outerjoin(FitRow, (FitRow.product_id == ProductRow.id) & (FitRow.status == ACTIVE))
        .where(jobs.scope_filter(job.scope))
        .order_by(ProductRow.sku)
    )
    if id_range is not None:
        query = query.where(ProductRow.id.between(*id_range))
    found: list[Candidate] = [(row[0], row[1], row[2]) for row in session.execute(query).all()]
    for product, _, _ in found:
        session.expunge(product)
    return found


def price_batch(
    session: Session,
    batch: Sequence[Candidate],
    request: OptimalPriceRequest,
    job_id: int,
    progress: jobs.Progress,
) -> list[dict[str, Any]]:
    """A batch's recommendations to store (one per product with an active fit); the
    others are counted as having no active fit or as failed with their reason, each
    product alone."""
    records: list[dict[str, Any]] = []
    now = utcnow()
    in_effect = rules.listed(session, in_effect_at=now)  # read once for the batch
    spread = move_spread_for(session, request.decide_by)  # kept per catalogue state
    for product, fit_id, created_at in batch:
        if fit_id is None:
            progress.counts["no_active_fit"] += 1
            progress.add_error(product.sku, "no active fit")
            continue
        try:
            fit = fit_cache.get(session, fit_id, created_at)
            scenario = {k: v for k, v in request.scenario.items() if k in fit.variable_means}
            limits = rule_limits.limits_for(
                session,
                rule_limits.ProductFacts(
                    product.id, product.sku, product.family, product.unit_cost, None
                ),
                at=now,
                unit_cost=request.unit_cost,
                current_price=current_price(product, fit, request.current_price),
                known=in_effect,
            )
            found = price_product(
                fit, product, request, scenario=scenario, rules=limits, move_spread=spread
            )
            record = price_record.with_prior_price(
                session, product.id, rule_limits.split_binding(found.to_dict(), limits)
            )
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
                "request": {"job_id": job_id, **request.model_dump(exclude={"store"})},
                "result": record,
                "created_at": utcnow(),
            }
        )
    return records
