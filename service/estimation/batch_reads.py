"""Reading a refit job's batches of histories ahead of the fitting, per database.

How a job reads is a :class:`ReadLane`: ``read`` begins reading a batch (in the order
fitted) and ``ahead`` says how many to have begun beyond the one being fitted.

- PostgreSQL: a thread of its own reads, since the driver waits for the server
  without holding the interpreter.
- SQLite: the driver takes the interpreter back for every row, so a thread would only
  take turns with the fitting; reader processes (`service.estimation.history_reader`)
  read the next batches' rows instead. Should one fail, the job reads the rest itself.
- Otherwise (one batch, in-memory databases, processes turned off) the job reads each
  batch itself when it needs it.
"""

from __future__ import annotations

import functools
import logging
from collections.abc import Callable, Iterator, Sequence
from concurrent.futures import ThreadPoolExecutor
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Generic, Protocol, TypeVar

from sqlalchemy import make_url
from sqlalchemy.orm import Session, sessionmaker

from models import History
from service.catalogue.ingest import cyclic_gc_paused
from service.core.db import session_scope
from service.core.settings import Settings
from service.estimation.histories import ProductRef, ReadRows, load_histories, names_to_read
from service.estimation.history_reader import HistoryReader, ReaderFailed
from service.estimation.history_rows import RowsRead
from service.estimation.refit_batches import Batch, covariates_used

log = logging.getLogger(__name__)

T = TypeVar("T")
T_co = TypeVar("T_co", covariant=True)


class Task(Protocol[T_co]):
    def result(self) -> T_co: ...


class Later(Generic[T]):
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
def lane(thread: bool, name: str) -> Iterator[Callable[..., Task[Any]]]:
    """Runs tasks one at a time: in a thread of its own, or in this thread when their
    result is asked for (as a plain call would, in the same order).

    On the way out, waits for the task in hand (a write in flight is finished, not cut
    off) and drops any not started.
    """
    if not thread:
        yield Later
        return
    executor = ThreadPoolExecutor(max_workers=1, thread_name_prefix=name)
    try:
        yield executor.submit
    finally:
        executor.shutdown(wait=True, cancel_futures=True)


@dataclass(frozen=True)
class ReadLane:
    """How a job reads its batches: ``read`` begins reading one (in the order fitted)
    and ``ahead`` is how many to have begun beyond the one being fitted."""

    read: Callable[[Batch], Task[list[History]]]
    ahead: int = 1


@contextmanager
def read_lane(
    reads: sessionmaker[Session], settings: Settings, n_batches: int
) -> Iterator[ReadLane]:
    """A thread that reads (PostgreSQL); reader processes (SQLite, two batches or more);
    or this thread, when the histories are asked for."""
    database = make_url(settings.database_url).database if settings.is_sqlite else None
    if not settings.is_sqlite:
        with lane(True, "marginal-refit-read") as submit:
            yield ReadLane(lambda batch: submit(read_batch, reads, batch))
        return
    if (
        settings.job_read_processes == 0
        or n_batches < 2
        or not database
        or database == ":memory:"
        or database.startswith("file:")
    ):
        yield ReadLane(lambda batch: Later(read_batch, reads, batch))
        return
    processes = ProcessReads(reads, n_batches)
    try:
        for _ in range(min(settings.job_read_processes, n_batches - 1)):
            processes.start(str(Path(database).resolve()), settings.sqlite_busy_timeout_ms)
        yield ReadLane(processes.read, ahead=processes.count + 1)
    finally:
        processes.close()


class ProcessReads:
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

    def read(self, batch: Batch) -> Task[list[History]]:
        turn, self._asked = self._asked, self._asked + 1
        if turn == 0 or self._failed or not self._readers:
            return Later(read_batch, self._reads, batch)
        assert batch.spec is not None
        reader = self._readers[(turn - 1) % len(self._readers)]
        asked = ([c.id for c in batch.members], names_to_read(covariates_used(batch.spec)))
        try:
            reader.ask(*asked)
            if self._asked == self._n_batches:
                for each in self._readers:
                    each.no_more_requests()
            return Later(self._answer, reader, batch, asked)
        except ReaderFailed as exc:
            self._give_up(exc)
            return Later(read_batch, self._reads, batch)

    def _answer(
        self, reader: HistoryReader, batch: Batch, asked: tuple[list[int], list[str] | None]
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

                return read_batch(self._reads, batch, rows=rows)
        return read_batch(self._reads, batch)

    def _give_up(self, exc: ReaderFailed) -> None:
        log.warning("refit reads in its own process from now on: %s", exc)
        self._failed = True
        self.close()

    def close(self) -> None:
        readers, self._readers = self._readers, []
        for reader in readers:
            reader.close()


def read_batch(
    reads: sessionmaker[Session], batch: Batch, *, rows: ReadRows | None = None
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
