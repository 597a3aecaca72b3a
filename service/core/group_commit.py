"""Group commit: writes from many request threads share one transaction.

On SQLite only one transaction writes at a time, and a request that takes the write lock
for a single small insert spends most of its turn waiting for the interpreter between
database calls, so under load writers queue behind each other. Here the first caller to
find no write in progress becomes the writer: it takes everything queued so far (its
own items and those of callers waiting behind it), writes it in one transaction, and
wakes the others once the commit is done. Every caller still returns only after its own
rows are committed, no thread is handed the work, and PostgreSQL saves commits the same
way.
"""

from __future__ import annotations

import threading
from collections.abc import Callable, Sequence
from typing import Generic, TypeVar

from sqlalchemy.orm import Session, sessionmaker

from service.core.db import session_scope

Item = TypeVar("Item")
Result = TypeVar("Result")


class _Entry(Generic[Item, Result]):
    __slots__ = ("items", "done", "result", "error")

    def __init__(self, items: Sequence[Item]) -> None:
        self.items = items
        self.done = False
        self.result: list[Result] = []
        self.error: BaseException | None = None

    def outcome(self) -> list[Result]:
        if self.error is not None:
            raise self.error
        return self.result


class GroupWriter(Generic[Item, Result]):
    """Runs ``write(session, items)`` for many callers, batching their calls.

    :meth:`submit` blocks until the caller's items are committed and returns what
    ``write`` returned for them, or raises what it raised. When a shared transaction
    fails, every caller of that batch is retried in a transaction of its own, so one
    caller's bad rows (say, a product deleted meanwhile) fail only that caller.
    """

    def __init__(
        self,
        sessions: sessionmaker[Session],
        write: Callable[[Session, Sequence[Item]], list[Result]],
        *,
        max_batch: int = 256,
    ) -> None:
        self._sessions = sessions
        self._write = write
        self._max_batch = max_batch
        self._changed = threading.Condition()
        self._pending: list[_Entry[Item, Result]] = []
        self._writing = False

    def submit(self, items: Sequence[Item]) -> list[Result]:
        entry: _Entry[Item, Result] = _Entry(items)
        with self._changed:
            self._pending.append(entry)
        while True:
            with self._changed:
                while not entry.done and self._writing:
                    self._changed.wait()
                if entry.done:
                    return entry.outcome()
                # No write in progress and ours is not done: write what has queued up.
                self._writing = True
                batch = self._pending[: self._max_batch]
                del self._pending[: self._max_batch]
            try:
                self._write_batch(batch)
            except BaseException as exc:
                for waiting in batch:  # never leave a caller waiting on a lost write
                    if not waiting.done:
                        waiting.error, waiting.done = exc, True
                raise
            finally:
                with self._changed:
                    self._writing = False
                    self._changed.notify_all()

    def pending(self) -> int:
        """Callers waiting for a write that has not started yet."""
        with self._changed:
            return len(self._pending)

    def _write_batch(self, batch: list[_Entry[Item, Result]]) -> None:
        if len(batch) > 1:
            try:
                with session_scope(self._sessions) as session:
                    results = [self._write(session, entry.items) for entry in batch]
            except Exception:  # noqa: BLE001 - retried one by one below
                pass
            else:
                for entry, result in zip(batch, results, strict=True):
                    entry.result, entry.done = result, True
                return
        for entry in batch:
            try:
                with session_scope(self._sessions) as session:
                    entry.result = self._write(session, entry.items)
            except BaseException as exc:  # noqa: BLE001 - raised in the caller's thread
                entry.error = exc
            entry.done = True
