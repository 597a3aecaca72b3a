"""Engine and session construction for SQLite (WAL) and PostgreSQL (psycopg 3)."""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

from sqlalchemy import Engine, create_engine, event
from sqlalchemy.orm import Session, sessionmaker

from service.settings import Settings


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
        )
        event.listen(engine, "connect", _sqlite_on_connect(settings.sqlite_busy_timeout_ms))
        event.listen(engine, "begin", _sqlite_on_begin)
        event.listen(engine.pool, "checkin", _sqlite_on_checkin)
        return engine
    connect_args: dict[str, Any] = {}
    if settings.database_schema:
        connect_args["options"] = f"-csearch_path={settings.database_schema}"
    return create_engine(url, connect_args=connect_args, pool_pre_ping=True, pool_size=10)


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


def _sqlite_on_begin(conn: Any) -> None:
    # Writers take the write lock at BEGIN: a transaction that reads and then writes
    # cannot fail on lock upgrade, and busy_timeout makes concurrent writers wait
    # instead of failing with "database is locked". Readers stay deferred (WAL).
    options = conn.get_execution_options()
    if options.get("bulk_load"):
        # Bulk loads resolve every product id inside their own write-locked
        # transaction, so per-row foreign-key checks (a third of an import's write
        # time) can prove nothing; checkin turns them back on.
        conn.exec_driver_sql("PRAGMA foreign_keys=OFF")
    if options.get("writer"):
        conn.exec_driver_sql("BEGIN IMMEDIATE")
    else:
        conn.exec_driver_sql("BEGIN")


def _sqlite_on_checkin(dbapi_conn: Any, _record: Any) -> None:
    dbapi_conn.execute("PRAGMA foreign_keys=ON")


def make_session_factory(
    engine: Engine, *, writer: bool, bulk_load: bool = False
) -> sessionmaker[Session]:
    """Sessions for reading, for writing (which lock SQLite for writing at BEGIN), or
    for bulk loads of observations whose product ids the load itself resolves."""
    bind = engine.execution_options(writer=True, bulk_load=bulk_load) if writer else engine
    return sessionmaker(bind=bind, expire_on_commit=False)


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
