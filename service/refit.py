"""The refit job: fit every product in scope with the batched path and activate what passes.

Products that share a spec are fitted together (`models.fit_many`) in batches; each
batch's fits, activations and the job's progress are written in one transaction.
Incremental by default: a product whose latest fit is newer than its last history
change is skipped unless the job is forced.
"""

from __future__ import annotations

import json
from collections import defaultdict
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

from sqlalchemy import func, insert, select, update
from sqlalchemy.orm import Session, sessionmaker

from models import DemandFit, FitFailure, History, ModelSpec, SpecError, fit_many
from service import jobs
from service.db import session_scope
from service.fits import ACTIVE, SUPERSEDED, quality_gates, row_values
from service.histories import ProductRef, load_histories
from service.ingest import cyclic_gc_paused
from service.numeric import NUMERIC_FAILURES, reason, strict_floats
from service.settings import Settings
from service.tables import FitRow, JobRow, ProductRow, as_utc


@dataclass(frozen=True)
class Candidate:
    id: int
    sku: str
    family: str | None
    spec: dict[str, Any]


def scope_filter(scope: dict[str, Any]) -> Any:
    if "family" in scope:
        return ProductRow.family == scope["family"]
    if "skus" in scope:
        return ProductRow.sku.in_(scope["skus"])
    return True


def select_candidates(session: Session, *, job: JobRow, progress: jobs.Progress) -> list[Candidate]:
    """Products to fit now; counts skipped and unknown ones into ``progress``."""
    options = job.options or {}
    latest_fit = (
        select(FitRow.product_id, func.max(FitRow.created_at).label("at"))
        .group_by(FitRow.product_id)
        .subquery()
    )
    rows = session.execute(
        select(
            ProductRow.id,
            ProductRow.sku,
            ProductRow.family,
            ProductRow.default_spec,
            ProductRow.history_changed_at,
            latest_fit.c.at,
        )
        .outerjoin(latest_fit, latest_fit.c.product_id == ProductRow.id)
        .where(scope_filter(job.scope))
        .order_by(ProductRow.sku)
    ).all()
    found = {r.sku for r in rows}
    for sku in job.scope.get("skus", []):
        if sku not in found:
            progress.total += 1
            progress.done += 1
            progress.counts["failed"] += 1
            progress.add_error(sku, "no such product")
    chosen = []
    for row in rows:
        progress.total += 1
        fresh = row.at is not None and (
            row.history_changed_at is None or as_utc(row.at) >= as_utc(row.history_changed_at)
        )
        if fresh and not options.get("force"):
            progress.done += 1
            progress.counts["skipped"] += 1
            continue
        spec = options.get("spec") if options.get("spec") is not None else row.default_spec
        chosen.append(Candidate(row.id, row.sku, row.family, spec or {}))
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

    groups: dict[str, list[Candidate]] = defaultdict(list)
    for candidate in candidates:
        groups[json.dumps(candidate.spec, sort_keys=True)].append(candidate)
    for key, members in groups.items():
        try:
            spec = ModelSpec.from_dict(json.loads(key))
        except SpecError as exc:
            with session_scope(writes) as session:
                for member in members:
                    progress.add_error(member.sku, f"invalid spec: {exc}")
                progress.counts["failed"] += len(members)
                progress.done += len(members)
                jobs.save_progress(session, job_id=job_id, progress=progress)
            continue
        size = settings.job_batch_size
        for start in range(0, len(members), size):
            batch = members[start : start + size]
            _fit_batch(
                reads,
                writes,
                job_id=job_id,
                batch=batch,
                spec=spec,
                settings=settings,
                progress=progress,
            )
            if on_progress:
                on_progress(progress)
    return progress


def _fit_batch(
    reads: sessionmaker[Session],
    writes: sessionmaker[Session],
    *,
    job_id: int,
    batch: Sequence[Candidate],
    spec: ModelSpec,
    settings: Settings,
    progress: jobs.Progress,
) -> None:
    cross = {c.sku: [s for s in spec.cross_prices if s != c.sku] for c in batch}
    # Histories, fits and records are many short-lived objects without cycles: collector
    # passes over them cost about a third of a batch and free nothing.
    with cyclic_gc_paused():
        _fit_and_record(
            reads,
            writes,
            job_id=job_id,
            batch=batch,
            spec=spec,
            cross=cross,
            settings=settings,
            progress=progress,
        )


def _fit_and_record(
    reads: sessionmaker[Session],
    writes: sessionmaker[Session],
    *,
    job_id: int,
    batch: Sequence[Candidate],
    spec: ModelSpec,
    cross: dict[str, list[str]],
    settings: Settings,
    progress: jobs.Progress,
) -> None:
    with session_scope(reads) as session:
        histories = load_histories(session, [ProductRef(c.id, c.sku) for c in batch], cross)
    families = {c.sku: c.family or "" for c in batch}
    results = fit_guarded(histories, spec, families=families)
    with session_scope(writes) as session:
        _record(
            session,
            job_id=job_id,
            batch=batch,
            results=results,
            settings=settings,
            progress=progress,
        )
        progress.done += len(batch)
        jobs.save_progress(session, job_id=job_id, progress=progress)


def fit_guarded(
    histories: Sequence[History], spec: ModelSpec, *, families: dict[str, str]
) -> list[DemandFit | FitFailure]:
    """``fit_many``, except that a product whose numbers defeat double precision becomes a
    failure of its own instead of stopping the whole batch."""
    try:
        with strict_floats():
            return fit_many(histories, spec, families=families)
    except NUMERIC_FAILURES:
        pass
    failures: dict[str, FitFailure] = {}
    for history in histories:
        try:
            with strict_floats():
                fit_many([history], spec, families=families)
        except NUMERIC_FAILURES as exc:
            failures[history.sku] = FitFailure(history.sku, reason(exc), type(exc).__name__)
    rest = [h for h in histories if h.sku not in failures]
    try:
        with strict_floats():
            fitted = iter(fit_many(rest, spec, families=families))
    except NUMERIC_FAILURES as exc:  # only together do they fail: fail them all
        fitted = iter(FitFailure(h.sku, reason(exc), type(exc).__name__) for h in rest)
    return [failures.get(h.sku) or next(fitted) for h in histories]


def _record(
    session: Session,
    *,
    job_id: int,
    batch: Sequence[Candidate],
    results: Sequence[DemandFit | FitFailure],
    settings: Settings,
    progress: jobs.Progress,
) -> None:
    """Write a batch's fits in bulk: supersede and activate in the same transaction."""
    ids = [c.id for c in batch]
    active = {
        r.product_id: (r.id, r.holdout_wape)
        for r in session.execute(
            select(FitRow.product_id, FitRow.id, FitRow.holdout_wape).where(
                FitRow.product_id.in_(ids), FitRow.status == ACTIVE
            )
        )
    }
    versions = dict(
        session.execute(
            select(FitRow.product_id, func.max(FitRow.version))
            .where(FitRow.product_id.in_(ids))
            .group_by(FitRow.product_id)
        ).all()
    )
    new_rows: list[dict[str, Any]] = []
    superseded: list[int] = []
    for candidate, result in zip(batch, results, strict=True):
        if isinstance(result, FitFailure):
            progress.counts["failed"] += 1
            progress.add_error(candidate.sku, result.reason.removeprefix(f"{candidate.sku}: "))
            continue
        previous = active.get(candidate.id)
        gates = quality_gates(result, previous[1] if previous else None, settings)
        passed = all(g.passed for g in gates)
        if passed:
            progress.counts["activated"] += 1
            if previous:
                superseded.append(previous[0])
        else:
            progress.counts["rejected"] += 1
            failed = ", ".join(g.name for g in gates if not g.passed)
            progress.add_error(candidate.sku, f"rejected by the quality gates: {failed}")
        version = (versions.get(candidate.id) or 0) + 1
        new_rows.append(
            row_values(
                product_id=candidate.id, version=version, fit=result, gates=gates, job_id=job_id
            )
        )
    if superseded:
        session.execute(update(FitRow).where(FitRow.id.in_(superseded)).values(status=SUPERSEDED))
    if new_rows:
        session.execute(insert(FitRow), new_rows)
