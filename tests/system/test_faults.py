"""Faults: the database goes away or stays locked, a commit fails, an upload is broken.

Whatever happens, a client is never told that something was stored when it was not: it
gets 503 problem+json with Retry-After while the database is unavailable, the service
recovers by itself when it returns, and a broken import writes nothing.
"""

from __future__ import annotations

import datetime as dt
import sqlite3
import threading
import time
from collections.abc import Callable
from typing import Any

import httpx
import pytest
import sqlalchemy as sa
from fastapi.testclient import TestClient
from sqlalchemy import event
from sqlalchemy.exc import OperationalError

from service.core.app import create_app
from service.core.db import make_engine
from service.core.settings import Settings
from tests.plugins.live_server import TcpProxy, serve, strict_json
from tests.plugins.storage import POSTGRES_URL, Database, make_key, row_count

pytestmark = pytest.mark.storage

PROBLEM_JSON = "application/problem+json"
WEEK0 = dt.date(2024, 1, 1)


def week(n: int) -> str:
    return (WEEK0 + dt.timedelta(weeks=n)).isoformat()


def observation(n: int, price: float = 5.0) -> dict[str, Any]:
    return {"period": week(n), "price": price, "units": 10.0 + n}


def assert_unavailable(response: httpx.Response) -> None:
    assert response.status_code == 503, response.text
    assert response.headers["content-type"] == PROBLEM_JSON
    assert int(response.headers["retry-after"]) > 0
    body = strict_json(response.text)
    assert body["status"] == 503 and body["detail"]


def stored_prices(settings: Settings, sku: str) -> dict[str, float]:
    engine = make_engine(settings)
    with engine.connect() as conn:
        rows = conn.execute(
            sa.text(
                "SELECT o.period, o.price FROM observations o "
                "JOIN products p ON p.id = o.product_id WHERE p.sku = :sku"
            ),
            {"sku": sku},
        ).all()
    engine.dispose()
    return {(d if isinstance(d, str) else d.isoformat()): float(p) for d, p in rows}


# ---------------------------------------------------------------- the database goes away


@pytest.fixture
def proxied(
    db: Database, tcp_proxy: Callable[[tuple[str, int]], TcpProxy]
) -> tuple[TcpProxy, Settings]:
    """Settings that reach PostgreSQL only through a proxy the test can stop."""
    if db.backend != "postgresql":
        pytest.skip("SQLite has no server to lose (see the locked-database test)")
    target = sa.make_url(POSTGRES_URL)
    proxy = tcp_proxy((target.host or "127.0.0.1", target.port or 5432))
    url = target.set(host="127.0.0.1", port=proxy.port)
    settings = db.settings.model_copy(
        update={"database_url": url.render_as_string(hide_password=False)}
    )
    return proxy, settings


def test_postgres_outage_gives_503_then_recovers_without_restart(
    proxied: tuple[TcpProxy, Settings], db: Database
) -> None:
    proxy, settings = proxied
    auth = {"Authorization": f"Bearer {make_key(db.settings, 'read', 'write')}"}
    csv_body = "sku,period,price,units\nOUT-1,2024-06-03,5.5,12\n"
    csv_headers = {"content-type": "text/csv"}
    with (
        serve(create_app(settings)) as base_url,
        httpx.Client(base_url=base_url, headers=auth, timeout=30) as http,
    ):
        assert http.put("/v1/products/OUT-1", json={"name": "Outage tin"}).status_code == 201
        first = {"observations": [observation(0)]}
        assert http.post("/v1/products/OUT-1/observations", json=first).status_code == 200
        # Fill the pool with several connections, all of which the outage will kill.
        parallel(base_url, auth, "/v1/products/OUT-1/observations", 6)

        background = Traffic(base_url, auth, "/v1/products/OUT-1/observations")
        background.start()
        time.sleep(0.2)
        proxy.stop()
        time.sleep(0.2)
        try:
            assert_unavailable(http.get("/v1/products"))
            assert_unavailable(http.get("/v1/products/OUT-1/observations"))
            later = {"observations": [observation(1)]}
            assert_unavailable(http.post("/v1/products/OUT-1/observations", json=later))
            assert_unavailable(http.post("/v1/imports", content=csv_body, headers=csv_headers))
            ready = http.get("/readyz")
            assert ready.status_code == 503
            assert strict_json(ready.text)["database"] == "unreachable"
            assert int(ready.headers["retry-after"]) > 0
            assert http.get("/healthz").status_code == 200
        finally:
            proxy.start()

        # Back without a restart, and no dead pooled connection is handed out again:
        # every request from now on succeeds at the first attempt.
        assert http.get("/readyz").status_code == 200
        for _ in range(12):
            assert http.get("/v1/products/OUT-1/observations").status_code == 200
        assert parallel(base_url, auth, "/v1/products/OUT-1/observations", 6) == [200] * 6
        assert http.post("/v1/products/OUT-1/observations", json=later).status_code == 200
        assert http.post("/v1/imports", content=csv_body, headers=csv_headers).status_code == 200
        background.stop()

        # A restart while no request runs: every pooled connection is dead, nothing has
        # noticed yet, and still the next requests succeed at the first attempt.
        parallel(base_url, auth, "/v1/products/OUT-1/observations", 6)
        proxy.stop()
        proxy.start()
        assert parallel(base_url, auth, "/v1/products/OUT-1/observations", 6) == [200] * 6
        assert http.get("/readyz").status_code == 200
    statuses = background.statuses
    assert 200 in statuses and 503 in statuses, statuses
    assert set(statuses) <= {200, 503}, statuses
    assert stored_prices(db.settings, "OUT-1") == {week(0): 5.0, week(1): 5.0, "2024-06-03": 5.5}


def parallel(base_url: str, auth: dict[str, str], path: str, n: int) -> list[int]:
    """Status codes of ``n`` simultaneous GETs (each on its own connection)."""
    statuses: list[int] = [0] * n
    gate = threading.Barrier(n, timeout=10)
    limits = httpx.Limits(max_connections=n)
    with httpx.Client(base_url=base_url, headers=auth, timeout=30, limits=limits) as http:

        def fetch(i: int) -> None:
            gate.wait()
            statuses[i] = http.get(path).status_code

        threads = [threading.Thread(target=fetch, args=(i,)) for i in range(n)]
        for thread in threads:
            thread.start()
        for thread in threads:
            thread.join(timeout=30)
    return statuses


class Traffic(threading.Thread):
    """Reads in a loop until stopped; 503 answers must be proper problems."""

    def __init__(self, base_url: str, auth: dict[str, str], path: str) -> None:
        super().__init__(daemon=True)
        self.base_url, self.auth, self.path = base_url, auth, path
        self.statuses: list[int] = []
        self.stopping = threading.Event()
        self.problem: BaseException | None = None

    def run(self) -> None:
        try:
            with httpx.Client(base_url=self.base_url, headers=self.auth, timeout=30) as http:
                for _ in range(2000):  # bounded, whatever happens
                    if self.stopping.is_set():
                        return
                    response = http.get(self.path)
                    if response.status_code == 503:
                        assert_unavailable(response)
                    self.statuses.append(response.status_code)
                    time.sleep(0.01)
        except BaseException as exc:  # reported by stop()
            self.problem = exc

    def stop(self) -> None:
        self.stopping.set()
        self.join(timeout=30)
        if self.problem is not None:
            raise self.problem


def test_sqlite_locked_past_the_busy_timeout_gives_503_then_succeeds(db: Database) -> None:
    if db.backend != "sqlite":
        pytest.skip("the lock timeout is SQLite's; PostgreSQL's outage has its own test")
    settings = db.settings.model_copy(update={"sqlite_busy_timeout_ms": 200})
    auth = {"Authorization": f"Bearer {make_key(settings, 'read', 'write')}"}
    path = db.settings.database_url.split("///", 1)[1]
    with TestClient(create_app(settings), raise_server_exceptions=False) as client:
        created = client.put("/v1/products/LCK-1", json={"name": "Lock tin"}, headers=auth)
        assert created.status_code == 201
        batch = {"observations": [observation(0)]}
        url = "/v1/products/LCK-1/observations"
        assert client.post(url, json=batch, headers=auth).status_code == 200

        holder = sqlite3.connect(path, isolation_level=None)
        holder.execute("BEGIN IMMEDIATE")  # another process holding the write lock
        try:
            changed = {"observations": [observation(0, price=9.0), observation(1)]}
            assert_unavailable(client.post(url, json=changed, headers=auth))
            csv_body = "sku,period,price,units\nLCK-1,2024-06-03,5.5,12\n"
            assert_unavailable(
                client.post(
                    "/v1/imports", content=csv_body, headers={**auth, "content-type": "text/csv"}
                )
            )
            # Readers are not blocked by a writer (WAL).
            assert client.get(url, headers=auth).status_code == 200
            assert client.get("/readyz").status_code == 200
        finally:
            holder.rollback()
            holder.close()
        assert client.post(url, json=changed, headers=auth).status_code == 200
    assert stored_prices(db.settings, "LCK-1") == {week(0): 9.0, week(1): 5.0}


def test_a_failed_commit_is_never_reported_as_stored(client: TestClient, db: Database) -> None:
    auth = {"Authorization": f"Bearer {make_key(db.settings, 'read', 'write')}"}
    first = client.put("/v1/products/CMT-1", json={"name": "Commit tin"}, headers=auth)
    assert first.status_code == 201
    url = "/v1/products/CMT-1/observations"

    def connection_lost(_session: Any) -> None:
        raise OperationalError("COMMIT", {}, ConnectionError("server closed the connection"))

    factory = client.app.state.write_sessions  # type: ignore[attr-defined]
    event.listen(factory, "before_commit", connection_lost)
    try:
        assert_unavailable(client.post(url, json={"observations": [observation(0)]}, headers=auth))
        created = client.put("/v1/products/CMT-2", json={"name": "Never stored"}, headers=auth)
        assert_unavailable(created)
    finally:
        event.remove(factory, "before_commit", connection_lost)
    assert row_count(db.settings, "observations") == 0
    assert client.get("/v1/products/CMT-2", headers=auth).status_code == 404
    assert (
        client.post(url, json={"observations": [observation(0)]}, headers=auth).status_code == 200
    )
    assert row_count(db.settings, "observations") == 1


# ---------------------------------------------------------------- a broken large import

BIG_ROWS = 30_000
BIG_SKUS = 30
CHUNK_ROWS = 3_000  # ten chunks
HEADER = "sku,period,price,units,promo\n"


def big_rows() -> list[str]:
    """Valid rows: BIG_SKUS products x BIG_ROWS / BIG_SKUS weeks."""
    weeks = BIG_ROWS // BIG_SKUS
    days = [(WEEK0 + dt.timedelta(weeks=n)).isoformat() for n in range(weeks)]
    return [
        f"BIG-{s:03d},{day},{4 + (n % 7) * 0.5},{10 + n % 13},{n % 2}\n"
        for s in range(BIG_SKUS)
        for n, day in enumerate(days)
    ]


def broken_upload(kind: str) -> tuple[bytes, int]:
    """A large file with one defect, and the line (1 = header) the problem is on."""
    rows = big_rows()
    if kind == "unterminated quote at the end":
        rows[-1] = rows[-1].rsplit(",", 1)[0] + ',"1'  # the upload stops inside a quoted cell
        return (HEADER + "".join(rows)).encode(), len(rows) + 1
    if kind == "too few fields near the end":
        rows[-3] = "BIG-000,2099-01-05,4.5\n"
        return (HEADER + "".join(rows)).encode(), len(rows) - 1
    assert kind == "invalid UTF-8 in the middle"
    middle = len(rows) // 2
    head = (HEADER + "".join(rows[:middle])).encode()
    bad = rows[middle].replace(",1\n", ",\xff1\n").replace(",0\n", ",\xff0\n").encode("latin-1")
    return head + bad + "".join(rows[middle + 1 :]).encode(), middle + 2


@pytest.mark.parametrize(
    "kind",
    ["unterminated quote at the end", "invalid UTF-8 in the middle", "too few fields near the end"],
)
def test_a_broken_large_import_writes_nothing(db: Database, kind: str) -> None:
    # Small chunks: several have been written inside the transaction before the defect.
    settings = db.settings.model_copy(update={"import_chunk_rows": CHUNK_ROWS})
    auth = {"Authorization": f"Bearer {make_key(settings, 'read', 'write')}"}
    csv_headers = {**auth, "content-type": "text/csv"}
    body, bad_line = broken_upload(kind)
    with TestClient(create_app(settings), raise_server_exceptions=False) as client:
        # Periods the big file would replace, with other values.
        seed = HEADER + "".join(f"BIG-000,{week(n)},9.75,1,0\n" for n in range(5))
        seeded = client.post(
            "/v1/imports", params={"create_products": "true"}, content=seed, headers=csv_headers
        )
        assert seeded.status_code == 200, seeded.text
        response = client.post(
            "/v1/imports", params={"create_products": "true"}, content=body, headers=csv_headers
        )
    assert response.status_code == 422, response.text[:500]
    assert response.headers["content-type"] == PROBLEM_JSON
    problem = strict_json(response.text)
    assert "nothing was written" in problem["detail"]
    assert [e["line"] for e in problem["errors"]] == [bad_line], problem["errors"]
    assert row_count(db.settings, "observations") == 5
    assert row_count(db.settings, "products") == 1
    assert stored_prices(db.settings, "BIG-000") == {week(n): 9.75 for n in range(5)}
