"""The refit job: fit every product in scope with the batched path and activate what passes.

Products that share a spec are fitted together (`models.fit_many`) in batches; each
batch's fits, activations and the job's progress are written in one transaction.
Incremental by default: a product whose latest fit is newer than its last history
change is left alone (counted as unchanged) unless the job refits unchanged histories.

Each batch is read, fitted, then written, and the next batch is read while this one is
fitted (how, per database: :mod:`service.estimation.batch_reads`). On PostgreSQL the
writes run in a thread of their own too, so the server stores the last batch while this
process fits; batches are still written one after the other, in order.
"""

from __future__ import annotations

import json
import logging
from collections import deque
from collections.abc import Sequence
from typing import Any

from sqlalchemy import Text, and_, cast, func, or_, select, true
from sqlalchemy.orm import Session, aliased, sessionmaker

from models import DemandFit, FitFailure, History, ModelSpec, fit_many
from service.catalogue.ingest import cyclic_gc_paused
from service.core.db import session_scope
from service.core.errors import failure_reason, is_outage, strict_floats
from service.core.settings import Settings
from service.core.tables import FitRow, JobRow, ProductRow, as_utc
from service.estimation import fit_store
from service.estimation.batch_reads import Task, lane, read_batch, read_lane
from service.estimation.fit_store import encode_result
from service.estimation.gates import ACTIVE
from service.estimation.refit_batches import Batch, Candidate, make_batches
from service.jobs import queue as jobs

log = logging.getLogger(__name__)


def select_candidates(
    session: Session,
    *,
    job: JobRow,
    progress: jobs.Progress,
    within: tuple[int, int] | None = None,
) -> list[Candidate]:
    """Products to fit now; counts unchanged and unknown ones into ``progress``.

    ``within``: only the product ids in this range (a partition; unknown skus are the
    job's to count). Fits made by this job itself do not make a product fresh, so a
    partition run again selects the same products as its first run.
    """
    options = job.options or {}
    latest_fit = (
        select(FitRow.product_id, func.max(FitRow.created_at).label("at"))
        .where(or_(FitRow.job_id.is_(None), FitRow.job_id != job.id))
        .where(true() if within is None else FitRow.product_id.between(*within))
        .group_by(FitRow.product_id)
        .subquery()
    )
    active = aliased(FitRow)
    rows = session.execute(
        select(
            ProductRow.id,
            ProductRow.sku,
            ProductRow.family,
            # As text: products mostly share a few specs, each decoded once below.
            cast(ProductRow.default_spec, Text).label("default_spec"),
            ProductRow.history_changed_at,
            latest_fit.c.at,
            active.form.label("active_form"),
        )
        .outerjoin(latest_fit, latest_fit.c.product_id == ProductRow.id)
        .outerjoin(active, and_(active.product_id == ProductRow.id, active.status == ACTIVE))
        .where(jobs.scope_filter(job.scope))
        .where(true() if within is None else ProductRow.id.between(*within))
        .order_by(ProductRow.sku)
    ).all()
    found = {r.sku for r in rows}
    for sku in job.scope.get("skus", []) if within is None else []:
        if sku not in found:
            progress.total += 1
            progress.done += 1
            progress.counts["failed"] += 1
            progress.add_error(sku, "no such product")
    specs: dict[str | None, tuple[dict[str, Any], str]] = {}

    def spec_of(text: str | None) -> tuple[dict[str, Any], str]:
        if text not in specs:
            if options.get("spec") is not None:
                spec = options["spec"]
            else:
                spec = (json.loads(text) if text is not None else None) or {}
            specs[text] = (spec, json.dumps(spec, sort_keys=True))
        return specs[text]

    chosen = []
    for row in rows:
        progress.total += 1
        fresh = row.at is not None and (
            row.history_changed_at is None or as_utc(row.at) >= as_utc(row.history_changed_at)
        )
        if fresh and not options.get("refit_unchanged"):
            progress.done += 1
            progress.counts["unchanged"] += 1
            continue
        spec, key = spec_of(row.default_spec)
        chosen.append(Candidate(row.id, row.sku, row.family, spec, key, row.active_form))
    return chosen


def run_refit(
    factories: tuple[sessionmaker[Session], sessionmaker[Session]],
    *,
    job_id: int,
    settings: Settings,
    on_progress: jobs.ProgressCallback | None = None,
) -> jobs.Progress:
    reads, writes = factories
    progress = jobs.Progress()
    with session_scope(reads) as session:
        job = jobs.get_or_raise(session, job_id=job_id)
        candidates = select_candidates(session, job=job, progress=progress)
    with session_scope(writes) as session:
        jobs.save_progress(session, job_id=job_id, progress=progress)
    if on_progress:
        on_progress(progress)

    batches = make_batches(candidates, settings.job_batch_size)
    fitted = [b for b in batches if b.spec is not None]
    threads = not settings.is_sqlite
    with (
        read_lane(reads, settings, len(fitted)) as reading_lane,
        lane(threads, "marginal-refit-write") as writer,
    ):
        upcoming = iter(fitted)

        def read_next() -> Task[list[History]] | None:
            batch = next(upcoming, None)
            return None if batch is None else reading_lane.read(batch)

        reading = deque([read_next() for _ in range(reading_lane.ahead)])
        writing: Task[None] | None = None

        def settle() -> None:
            """Wait for the batch being written; progress is then this thread's again."""
            nonlocal writing
            if writing is not None:
                done, writing = writing, None
                done.result()
                if on_progress:
                    on_progress(progress)

        for batch in batches:
            if batch.spec is None:
                settle()
                with session_scope(writes) as session:
                    for member in batch.members:
                        progress.add_error(member.sku, f"invalid spec: {batch.invalid}")
                    progress.counts["failed"] += len(batch.members)
                    progress.done += len(batch.members)
                    jobs.save_progress(session, job_id=job_id, progress=progress)
                continue
            task = reading.popleft()
            assert task is not None
            histories, unread = read_guarded(reads, batch, task)
            reading.append(read_next())
            families = {c.sku: c.family or "" for c in batch.members}
            # Histories, fits and records are many short-lived objects without cycles:
            # collector passes over them cost about a third of a batch and free nothing.
            with cyclic_gc_paused():
                fits = iter(
                    fit_guarded(
                        histories, batch.spec, families=families, previous_forms=earlier(batch)
                    )
                )
                results = [unread.get(c.sku) or next(fits) for c in batch.members]
                # The records' JSON (most of a write's work) is made here, in parallel
                # with the last batch's write on PostgreSQL.
                results, texts = encode_guarded(results)
            del histories
            settle()
            writing = writer(
                _write,
                writes,
                job_id=job_id,
                batch=batch.members,
                results=results,
                texts=texts,
                settings=settings,
                progress=progress,
            )
            if not threads:
                settle()
        settle()
    return progress


def _write(
    writes: sessionmaker[Session],
    *,
    job_id: int,
    batch: Sequence[Candidate],
    results: Sequence[DemandFit | FitFailure],
    texts: Sequence[str | None],
    settings: Settings,
    progress: jobs.Progress,
) -> None:
    with cyclic_gc_paused(), session_scope(writes) as session:
        _record(
            session,
            job_id=job_id,
            batch=batch,
            results=results,
            texts=texts,
            settings=settings,
            progress=progress,
        )
        progress.done += len(batch)
        jobs.save_progress(session, job_id=job_id, progress=progress)


def read_guarded(
    reads: sessionmaker[Session], batch: Batch, task: Task[list[History]]
) -> tuple[list[History], dict[str, FitFailure]]:
    """A batch's histories; if the batch cannot be read, each product is read alone and
    one that still cannot be read becomes a failure of its own (with its reason), so the
    job goes on. A database that cannot be reached at all stops the job."""
    try:
        return task.result(), {}
    except Exception as exc:
        if is_outage(exc):
            raise
        log.warning("refit: a batch could not be read, reading its products one by one")
    histories: list[History] = []
    unread: dict[str, FitFailure] = {}
    for member in batch.members:
        try:
            histories += read_batch(reads, Batch([member], batch.spec))
        except Exception as exc:
            if is_outage(exc):
                raise
            log.warning("refit: %s cannot be read: %s", member.sku, failure_reason(exc))
            unread[member.sku] = FitFailure(
                member.sku, f"cannot be read: {failure_reason(exc)}", type(exc).__name__
            )
    return histories, unread


def earlier(batch: Batch) -> dict[str, str]:
    """The forms of the batch's active fits, by sku (``auto`` keeps one when it is as good)."""
    return {c.sku: c.previous_form for c in batch.members if c.previous_form is not None}


def fit_guarded(
    histories: Sequence[History],
    spec: ModelSpec,
    *,
    families: dict[str, str],
    previous_forms: dict[str, str] | None = None,
) -> list[DemandFit | FitFailure]:
    """``fit_many``, except that a product that cannot be fitted (numbers that defeat
    double precision, or any other error of its own) becomes a failure of its own
    instead of stopping the whole batch."""

    def fit(part: Sequence[History]) -> list[DemandFit | FitFailure]:
        with strict_floats():
            return fit_many(part, spec, families=families, previous_forms=previous_forms)

    try:
        return fit(histories)
    except Exception as exc:
        if is_outage(exc):
            raise
    failures: dict[str, FitFailure] = {}
    for history in histories:
        try:
            fit([history])
        except Exception as exc:
            if is_outage(exc):
                raise
            failures[history.sku] = FitFailure(history.sku, failure_reason(exc), type(exc).__name__)
    rest = [h for h in histories if h.sku not in failures]
    try:
        fitted = iter(fit(rest))
    except Exception as exc:  # only together do they fail: fail them all
        if is_outage(exc):
            raise
        fitted = iter(FitFailure(h.sku, failure_reason(exc), type(exc).__name__) for h in rest)
    return [failures.get(h.sku) or next(fitted) for h in histories]


def encode_guarded(
    results: Sequence[DemandFit | FitFailure],
) -> tuple[list[DemandFit | FitFailure], list[str | None]]:
    """The records' JSON text; a fit whose record cannot be written becomes a failure."""
    out: list[DemandFit | FitFailure] = []
    texts: list[str | None] = []
    for result in results:
        text = None
        if isinstance(result, DemandFit):
            try:
                text = encode_result(result)
            except Exception as exc:
                result = FitFailure(
                    result.sku, f"cannot be stored: {failure_reason(exc)}", type(exc).__name__
                )
        out.append(result)
        texts.append(text)
    return out, texts


def _record(
    session: Session,
    *,
    job_id: int,
    batch: Sequence[Candidate],
    results: Sequence[DemandFit | FitFailure],
    texts: Sequence[str | None],
    settings: Settings,
    progress: jobs.Progress,
) -> None:
    """Write a batch's fits in bulk: supersede and activate in the same transaction."""
    outcomes = fit_store.activate(
        session,
        targets=[fit_store.FitTarget(c.id, c.sku) for c in batch],
        results=results,
        texts=texts,
        settings=settings,
        job_id=job_id,
    )
    for outcome in outcomes:
        progress.counts[outcome.outcome] += 1
        if outcome.reason:
            progress.add_error(outcome.sku, outcome.reason)
