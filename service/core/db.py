"""Engine and session construction for SQLite (WAL) and PostgreSQL (psycopg 3)."""

from __future__ import annotations

import threading
import time
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

from sqlalchemy import Connection, Engine, create_engine, event
from sqlalchemy.orm import Session, sessionmaker

from service.core import json_text
from service.core.settings import Settings


def make_engine(settings: Settings) -> Engine:
    """Build the engine for the configured database, with per-backend connection setup."""
    url = settings.database_url
    if settings.is_sqlite:
        _ensure_sqlite_folder(url)
        engine = create_engine(
            url,
            connect_args={
                "timeout": settings.sqlite_busy_timeout_ms / 1000,
                "check_same_thread": False,
            },
            pool_size=settings.database_pool_size,
            json_serializer=json_text.dumps,
            # Errors and logs name a failing statement, never its values (a key's hash).
            hide_parameters=True,
        )
        queue = _WriterQueue(settings.sqlite_busy_timeout_ms / 1000)
        event.listen(engine, "connect", _sqlite_on_connect(settings.sqlite_busy_timeout_ms))
        event.listen(engine, "begin", _sqlite_on_begin(queue, settings.sqlite_busy_timeout_ms))
        for name in ("commit", "rollback"):
            event.listen(engine, name, queue.leave)
        event.listen(engine.pool, "reset", queue.on_reset)
        event.listen(engine.pool, "checkin", _sqlite_on_checkin(queue))
        return engine
    connect_args: dict[str, Any] = {}
    if settings.database_schema:
        connect_args["options"] = f"-csearch_path={settings.database_schema}"
    return create_engine(
        url,
        connect_args=connect_args,
        pool_pre_ping=True,
        pool_size=settings.database_pool_size,
        json_serializer=json_text.dumps,
        # Errors and logs name a failing statement, never its values (a key's hash).
        hide_parameters=True,
    )


def _ensure_sqlite_folder(url: str) -> None:
    path = url.split("///", 1)[-1]
    if path and path != ":memory:" and not path.startswith("file:"):
        Path(path).parent.mkdir(parents=True, exist_ok=True)


def _sqlite_on_connect(busy_timeout_ms: int) -> Any:
    def on_connect(dbapi_conn: Any, _record: Any) -> None:
        # Let SQLAlchemy, not pysqlite, issue BEGIN, so BEGIN IMMEDIATE below takes effect.
        dbapi_conn.isolation_level = None
        cursor = dbapi_conn.cursor()
        cursor.execute("PRAGMA journal_mode=WAL")
        cursor.execute(f"PRAGMA busy_timeout={int(busy_timeout_ms)}")
        cursor.execute("PRAGMA foreign_keys=ON")
        cursor.execute("PRAGMA synchronous=NORMAL")
        cursor.close()

    return on_connect


_FOREIGN_KEYS_OFF = "marginal_foreign_keys_off"


class _WriterQueue:
    """Makes this process's SQLite writers take turns on a lock before BEGIN IMMEDIATE.

    SQLite's busy handler polls with sleeps of up to 100 ms, so writers of one process
    that collide wait far longer than the transaction they wait for. Queueing on a
    thread lock first hands the database over as soon as the writer before commits.
    The database's own lock still decides; this only orders the waiting, and after the
    busy timeout a writer goes ahead without its turn (SQLite then times it out as
    before), so a lost release can slow writers down but never wedge them.
    """

    _HELD = "marginal_writer_turn"

    def __init__(self, timeout_s: float) -> None:
        self._lock = threading.Lock()
        self._timeout_s = timeout_s

    def enter(self, conn: Connection) -> float:
        """Wait for this process's turn (at most the busy timeout); the seconds waited."""
        start = time.monotonic()
        if self._lock.acquire(timeout=self._timeout_s):
            conn.info[self._HELD] = True
        return time.monotonic() - start

    def try_enter(self, conn: Connection) -> bool:
        """Take the turn only if no writer of this process holds it."""
        if self._lock.acquire(blocking=False):
            conn.info[self._HELD] = True
            return True
        return False

    def leave(self, conn: Connection) -> None:
        self._release(conn.info)

    def on_reset(self, dbapi_connection: Any, connection_record: Any, reset_state: Any) -> None:
        # (SQLAlchemy tells this event's signature by its parameter names.)
        self._release(connection_record.info)

    def release_record(self, connection_record: Any) -> None:
        self._release(connection_record.info)

    def _release(self, info: dict[Any, Any]) -> None:
        if info.pop(self._HELD, False):
            self._lock.release()


class WriteBusy(Exception):
    """A write that must not wait found the database's write lock taken."""


def _begin_immediate(conn: Connection, wait_ms: int, busy_timeout_ms: int) -> None:
    """BEGIN IMMEDIATE waiting at most ``wait_ms`` for the lock, then the usual timeout."""
    if wait_ms >= busy_timeout_ms:
        conn.exec_driver_sql("BEGIN IMMEDIATE")
        return
    conn.exec_driver_sql(f"PRAGMA busy_timeout={max(wait_ms, 0)}")
    try:
        conn.exec_driver_sql("BEGIN IMMEDIATE")
    finally:
        conn.exec_driver_sql(f"PRAGMA busy_timeout={busy_timeout_ms}")


def _sqlite_on_begin(queue: _WriterQueue, busy_timeout_ms: int) -> Any:
    def on_begin(conn: Connection) -> None:
        # Writers take the write lock at BEGIN: a transaction that reads and then writes
        # cannot fail on lock upgrade, and busy_timeout makes concurrent writers wait
        # instead of failing with "database is locked". Readers stay deferred (WAL).
        options = conn.get_execution_options()
        if options.get("bulk_load"):
            # Bulk loads resolve every product id inside their own write-locked
            # transaction, so per-row foreign-key checks (a third of an import's write
            # time) can prove nothing; checkin turns them back on.
            conn.exec_driver_sql("PRAGMA foreign_keys=OFF")
            conn.info[_FOREIGN_KEYS_OFF] = True
        if options.get("no_wait"):
            # A write that may be skipped (a key's last-used time): never wait for
            # another writer, of this process or another.
            if not queue.try_enter(conn):
                raise WriteBusy("another writer of this process holds the database")
            try:
                _begin_immediate(conn, 0, busy_timeout_ms)
            except BaseException:
                queue.leave(conn)
                raise
        elif options.get("writer"):
            # The busy timeout bounds the whole wait: the turn in this process's queue
            # and then the database's lock, not each of them.
            waited_ms = int(queue.enter(conn) * 1000)
            try:
                _begin_immediate(conn, busy_timeout_ms - waited_ms, busy_timeout_ms)
            except BaseException:
                queue.leave(conn)
                raise
        else:
            conn.exec_driver_sql("BEGIN")

    return on_begin


def _sqlite_on_checkin(queue: _WriterQueue) -> Any:
    def on_checkin(dbapi_conn: Any, record: Any) -> None:
        queue.release_record(record)
        if record.info.pop(_FOREIGN_KEYS_OFF, False):
            dbapi_conn.execute("PRAGMA foreign_keys=ON")

    return on_checkin


def make_session_factory(
    engine: Engine, *, writer: bool, bulk_load: bool = False
) -> sessionmaker[Session]:
    """Sessions for reading, for writing (which lock SQLite for writing at BEGIN), or
    for bulk loads of observations whose product ids the load itself resolves."""
    bind = engine.execution_options(writer=True, bulk_load=bulk_load) if writer else engine
    return sessionmaker(bind=bind, expire_on_commit=False)


def make_no_wait_factory(engine: Engine) -> sessionmaker[Session]:
    """Write sessions for work that may be skipped: on SQLite, beginning one raises
    :class:`WriteBusy` or a "database is locked" error at once instead of waiting for the
    write lock. (On PostgreSQL they are ordinary write sessions; statements that must not
    wait there use ``SKIP LOCKED``.)"""
    return sessionmaker(
        bind=engine.execution_options(writer=True, no_wait=True), expire_on_commit=False
    )


@contextmanager
def session_scope(factory: sessionmaker[Session]) -> Iterator[Session]:
    """One unit of work: commit on success, roll back on any error."""
    session = factory()
    try:
        yield session
        session.commit()
    except BaseException:
        session.rollback()
        raise
    finally:
        session.close()
