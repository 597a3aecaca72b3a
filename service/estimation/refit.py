"""The refit job: fit every product in scope with the batched path and activate what passes.

Products that share a spec are fitted together (`models.fit_many`) in batches; each
batch's fits, activations and the job's progress are written in one transaction.
Incremental by default: a product whose latest fit is newer than its last history
change is skipped unless the job is forced.

Each batch is read, fitted, then written, and the next batch is read while this one is
fitted. On PostgreSQL the reads and the writes run in threads of their own, so the
server reads the next batch and stores the last while this process fits (the driver
waits for the server without holding the interpreter); batches are still written one
after the other, in order. On SQLite the driver takes the interpreter back for every
row, so threads would only take turns: reader processes (`service.estimation.history_reader`)
read the next batches' rows while this process fits and writes. Should one fail, the
job reads the rest itself.
"""

from __future__ import annotations

import functools
import json
import logging
from collections import defaultdict, deque
from collections.abc import Callable, Iterator, Sequence
from concurrent.futures import ThreadPoolExecutor
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Generic, Protocol, TypeVar

from sqlalchemy import Text, cast, func, make_url, select
from sqlalchemy.orm import Session, sessionmaker

from models import UNIT_COST, DemandFit, FitFailure, History, ModelSpec, SpecError, fit_many
from service.catalogue.ingest import cyclic_gc_paused
from service.core.db import session_scope
from service.core.errors import NUMERIC_FAILURES, numeric_reason, strict_floats
from service.core.settings import Settings
from service.core.tables import FitRow, JobRow, ProductRow, as_utc
from service.estimation import fit_store
from service.estimation.fit_store import encode_result
from service.estimation.histories import ProductRef, ReadRows, load_histories, names_to_read
from service.estimation.history_reader import HistoryReader, ReaderFailed
from service.estimation.history_rows import RowsRead
from service.jobs import queue as jobs

log = logging.getLogger(__name__)

T = TypeVar("T")
T_co = TypeVar("T_co", covariant=True)


@dataclass(frozen=True)
class Candidate:
    id: int
    sku: str
    family: str | None
    spec: dict[str, Any]
    # The spec as canonical JSON: products whose keys are equal are fitted together.
    key: str = ""


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
            # As text: products mostly share a few specs, each decoded once below.
            cast(ProductRow.default_spec, Text).label("default_spec"),
            ProductRow.history_changed_at,
            latest_fit.c.at,
        )
        .outerjoin(latest_fit, latest_fit.c.product_id == ProductRow.id)
        .where(jobs.scope_filter(job.scope))
        .order_by(ProductRow.sku)
    ).all()
    found = {r.sku for r in rows}
    for sku in job.scope.get("skus", []):
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
        if fresh and not options.get("force"):
            progress.done += 1
            progress.counts["skipped"] += 1
            continue
        spec, key = spec_of(row.default_spec)
        chosen.append(Candidate(row.id, row.sku, row.family, spec, key))
    return chosen


@dataclass(frozen=True)
class _Batch:
    """Products fitted and written together: a spec, or why their spec is invalid."""

    members: Sequence[Candidate]
    spec: ModelSpec | None
    invalid: str = ""


def _batches(candidates: Sequence[Candidate], size: int) -> list[_Batch]:
    groups: dict[str, list[Candidate]] = defaultdict(list)
    for candidate in candidates:
        groups[candidate.key or json.dumps(candidate.spec, sort_keys=True)].append(candidate)
    out = []
    for key, members in groups.items():
        try:
            spec = ModelSpec.from_dict(json.loads(key))
        except SpecError as exc:
            out.append(_Batch(members, None, str(exc)))
            continue
        out += [_Batch(members[i : i + size], spec) for i in range(0, len(members), size)]
    return out


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

    batches = _batches(candidates, settings.job_batch_size)
    fitted = [b for b in batches if b.spec is not None]
    threads = not settings.is_sqlite
    with _read_lane(reads, settings, len(fitted)) as read_lane, _lane(
        threads, "marginal-refit-write"
    ) as writer:
        upcoming = iter(fitted)

        def read_next() -> _Task[list[History]] | None:
            batch = next(upcoming, None)
            return None if batch is None else read_lane.read(batch)

        reading = deque([read_next() for _ in range(read_lane.ahead)])
        writing: _Task[None] | None = None

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
            histories = task.result()
            reading.append(read_next())
            families = {c.sku: c.family or "" for c in batch.members}
            # Histories, fits and records are many short-lived objects without cycles:
            # collector passes over them cost about a third of a batch and free nothing.
            with cyclic_gc_paused():
                results = fit_guarded(histories, batch.spec, families=families)
                # The records' JSON (most of a write's work) is made here, in parallel
                # with the last batch's write on PostgreSQL.
                texts = [encode_result(r) if isinstance(r, DemandFit) else None for r in results]
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


class _Task(Protocol[T_co]):
    def result(self) -> T_co: ...


class _Later(Generic[T]):
    """A task run in this thread when its result is first asked for."""

    def __init__(self, fn: Callable[..., T], /, *args: Any, **kwargs: Any) -> None:
        self._call: Callable[[], T] | None = functools.partial(fn, *args, **kwargs)
        self._value: T | None = None

    def result(self) -> T:
        if self._call is not None:
            self._value = self._call()
            self._call = None
        return self._value  # type: ignore[return-value]


@contextmanager
def _lane(thread: bool, name: str) -> Iterator[Callable[..., _Task[Any]]]:
    """Runs tasks one at a time: in a thread of its own, or in this thread when their
    result is asked for (as a plain call would, in the same order).

    On the way out, waits for the task in hand (a write in flight is finished, not cut
    off) and drops any not started.
    """
    if not thread:
        yield _Later
        return
    executor = ThreadPoolExecutor(max_workers=1, thread_name_prefix=name)
    try:
        yield executor.submit
    finally:
        executor.shutdown(wait=True, cancel_futures=True)


@dataclass(frozen=True)
class _ReadLane:
    """How a job reads its batches: ``read`` begins reading one (in the order fitted)
    and ``ahead`` is how many to have begun beyond the one being fitted."""

    read: Callable[[_Batch], _Task[list[History]]]
    ahead: int = 1


@contextmanager
def _read_lane(
    reads: sessionmaker[Session], settings: Settings, n_batches: int
) -> Iterator[_ReadLane]:
    """A thread that reads (PostgreSQL); reader processes (SQLite, two batches or more);
    or this thread, when the histories are asked for."""
    database = make_url(settings.database_url).database if settings.is_sqlite else None
    if not settings.is_sqlite:
        with _lane(True, "marginal-refit-read") as submit:
            yield _ReadLane(lambda batch: submit(_read, reads, batch))
        return
    if (
        settings.job_read_processes == 0
        or n_batches < 2
        or not database
        or database == ":memory:"
        or database.startswith("file:")
    ):
        yield _ReadLane(lambda batch: _Later(_read, reads, batch))
        return
    processes = _ProcessReads(reads, n_batches)
    try:
        for _ in range(min(settings.job_read_processes, n_batches - 1)):
            processes.start(str(Path(database).resolve()), settings.sqlite_busy_timeout_ms)
        yield _ReadLane(processes.read, ahead=processes.count + 1)
    finally:
        processes.close()


class _ProcessReads:
    """Batches read by reader processes in turn; if one fails, this process reads the
    batches it had and all later ones.

    The first batch is read here, while the processes start and read the next ones.
    Once every batch has been asked for, the processes are told that no more will
    come, so they end as soon as they have answered.
    """

    def __init__(self, reads: sessionmaker[Session], n_batches: int) -> None:
        self._reads = reads
        self._readers: list[HistoryReader] = []
        self._asked = 0
        self._n_batches = n_batches
        self._failed = False

    @property
    def count(self) -> int:
        return len(self._readers)

    def start(self, database: str, busy_timeout_ms: int) -> None:
        try:
            self._readers.append(HistoryReader(database, busy_timeout_ms))
        except OSError as exc:
            log.warning("refit reads in its own process: no reader process (%s)", exc)

    def read(self, batch: _Batch) -> _Task[list[History]]:
        turn, self._asked = self._asked, self._asked + 1
        if turn == 0 or self._failed or not self._readers:
            return _Later(_read, self._reads, batch)
        assert batch.spec is not None
        reader = self._readers[(turn - 1) % len(self._readers)]
        asked = ([c.id for c in batch.members], names_to_read(covariates_used(batch.spec)))
        try:
            reader.ask(*asked)
            if self._asked == self._n_batches:
                for each in self._readers:
                    each.no_more_requests()
            return _Later(self._answer, reader, batch, asked)
        except ReaderFailed as exc:
            self._give_up(exc)
            return _Later(_read, self._reads, batch)

    def _answer(
        self, reader: HistoryReader, batch: _Batch, asked: tuple[list[int], list[str] | None]
    ) -> list[History]:
        if not self._failed:
            try:
                answer = reader.answer()
            except ReaderFailed as exc:
                self._give_up(exc)
            else:

                def rows(ids: Sequence[int], names: list[str] | None) -> RowsRead:
                    assert (list(ids), names) == asked, "a batch read other than the one asked"
                    return answer

                return _read(self._reads, batch, rows=rows)
        return _read(self._reads, batch)

    def _give_up(self, exc: ReaderFailed) -> None:
        log.warning("refit reads in its own process from now on: %s", exc)
        self._failed = True
        self.close()

    def close(self) -> None:
        readers, self._readers = self._readers, []
        for reader in readers:
            reader.close()


def _read(
    reads: sessionmaker[Session], batch: _Batch, *, rows: ReadRows | None = None
) -> list[History]:
    assert batch.spec is not None
    spec = batch.spec
    cross = {c.sku: [s for s in spec.cross_prices if s != c.sku] for c in batch.members}
    with cyclic_gc_paused(), session_scope(reads) as session:
        return load_histories(
            session,
            [ProductRef(c.id, c.sku) for c in batch.members],
            cross,
            covariates=covariates_used(spec),
            rows=rows,
        )


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


def covariates_used(spec: ModelSpec) -> list[str]:
    """The covariates a fit under ``spec`` reads: its terms, and its instruments other
    than the unit cost (which has a column of its own)."""
    instruments = [name for name in spec.instruments if name != UNIT_COST]
    return list(dict.fromkeys([*spec.covariates, *instruments]))


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
            failures[history.sku] = FitFailure(history.sku, numeric_reason(exc), type(exc).__name__)
    rest = [h for h in histories if h.sku not in failures]
    try:
        with strict_floats():
            fitted = iter(fit_many(rest, spec, families=families))
    except NUMERIC_FAILURES as exc:  # only together do they fail: fail them all
        fitted = iter(FitFailure(h.sku, numeric_reason(exc), type(exc).__name__) for h in rest)
    return [failures.get(h.sku) or next(fitted) for h in histories]


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
