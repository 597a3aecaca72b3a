"""Concurrent writers, readers and a refit job against a served instance lose nothing.

Eight writers (CSV imports and JSON batches) write overlapping periods of one set of
products while readers query and refit jobs run in the service's worker. Overlapping
writes of a period carry the same values, except for "contested" periods that one
writer writes before a barrier and another rewrites with other values after it; so
every serial replay of the same requests (in any order that keeps the barrier) ends in
one state, which the database must hold exactly afterwards.
"""

from __future__ import annotations

import datetime as dt
import threading
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import httpx
import pytest
import sqlalchemy as sa

from service.core.app import create_app
from service.core.db import make_engine
from tests.plugins.live_server import serve, strict_json
from tests.plugins.storage import Database, make_key

pytestmark = pytest.mark.storage

SKUS = [f"CC-{i:02d}" for i in range(1, 5)]
NEW_SKUS = ["CC-NEW-1", "CC-NEW-2"]  # created by whichever import gets there first
ALL_SKUS = SKUS + NEW_SKUS
FIRST_WEEK = dt.date(2024, 1, 1)
SEED_WEEKS = range(0, 20)
WRITERS = 8
CONTESTED_WEEK = 50  # writer w owns week 50 + w before the barrier (no range reaches it)
REQUEST_TIMEOUT = 60.0
RUN_SECONDS = 60.0  # readers and the job loop give up after this long

Key = tuple[str, str]  # (sku, ISO period)
Rows = list[tuple[str, dict[str, Any]]]  # (sku, observation as sent in JSON)


def period(week: int) -> str:
    return (FIRST_WEEK + dt.timedelta(weeks=week)).isoformat()


def values(sku: str, week: int, rewritten: bool = False) -> dict[str, Any]:
    """The observation every writer sends for (sku, week), or its rewritten version.

    Binary fractions only, so CSV text, JSON and both databases keep them exactly. The
    rewritten version differs in every field and lacks a covariate, so a rewrite that
    merged rather than replaced the stored period would show.
    """
    s = ALL_SKUS.index(sku)
    price = 4.0 + 0.25 * ((week * 7 + s * 3) % 13)
    units = 20.0 + 2.0 * ((week * 5 + s) % 17)
    covariates = {"promo": float(week % 4 == 0), "rival": 1.0 + 0.125 * (week % 5)}
    row: dict[str, Any] = {
        "period": period(week),
        "price": price,
        "units": units,
        "unit_cost": 2.5,
        "in_stock": week % 9 != 0,
        "covariates": covariates,
    }
    if rewritten:
        row.update(price=price + 0.5, units=units + 1.0, unit_cost=None, in_stock=week % 9 == 0)
        row["covariates"] = {"rival": covariates["rival"] + 0.25}
    return row


def csv_text(rows: Rows) -> str:
    lines = ["sku,period,price,units,unit_cost,in_stock,promo,rival"]
    for sku, r in rows:
        cov = r["covariates"]
        cost = "" if r["unit_cost"] is None else repr(r["unit_cost"])
        lines.append(
            f"{sku},{r['period']},{r['price']!r},{r['units']!r},{cost},"
            f"{str(r['in_stock']).lower()},{cov.get('promo', '')},{cov.get('rival', '')}"
        )
    return "\n".join(lines) + "\n"


@dataclass
class Ledger:
    """What the writers did, in an order the barrier makes meaningful."""

    before: list[tuple[Key, dict[str, Any]]] = field(default_factory=list)
    after: list[tuple[Key, dict[str, Any]]] = field(default_factory=list)
    answers: list[tuple[str, int, Any]] = field(default_factory=list)
    lock: threading.Lock = field(default_factory=threading.Lock)

    def record(self, phase: str, rows: Rows, response: httpx.Response) -> None:
        body = strict_json(response.text)
        with self.lock:
            self.answers.append((phase, response.status_code, body))
            if response.status_code == 200:
                target = self.before if phase == "before" else self.after
                target.extend(((sku, r["period"]), r) for sku, r in rows)

    def replay(self, seed: Rows) -> dict[Key, dict[str, Any]]:
        """The state a serial replay of every successful request ends in."""
        state = {(sku, row["period"]): row for sku, row in seed}
        for phase in (self.before, self.after):
            sent: dict[Key, dict[str, Any]] = {}
            for key, row in phase:
                # One value per period within a phase, so the order inside it cannot matter.
                assert sent.setdefault(key, row) == row, key
            state.update(sent)
        return state


def writer_plan(w: int) -> tuple[Rows, Rows]:
    """Rows writer ``w`` sends before and after the barrier.

    Before: weeks [4w, 4w + 16) of every product (each period is sent by up to four
    writers) and its own contested week. After: weeks [3w + 10, 3w + 22), and the next
    writer's contested week, rewritten. Writers 2, 3, 6 and 7 go through the products in
    reverse, so that concurrent multi-chunk imports reach them in different orders.
    """
    skus = ALL_SKUS if w % 2 == 0 else SKUS  # JSON batches need existing products
    order = skus if w % 4 < 2 else list(reversed(skus))
    before = [(s, values(s, week)) for s in order for week in range(4 * w, 4 * w + 16)]
    before += [(s, values(s, CONTESTED_WEEK + w)) for s in order]
    rival = (w + 1) % WRITERS
    after = [(s, values(s, week)) for s in order for week in range(3 * w + 10, 3 * w + 22)]
    after += [(s, values(s, CONTESTED_WEEK + rival, rewritten=True)) for s in order]
    return before, after


def post_rows(http: httpx.Client, w: int, rows: Rows) -> list[tuple[Rows, httpx.Response]]:
    """CSV imports for even writers (two files), JSON batches per product for odd ones."""
    if w % 2 == 0:
        half = len(rows) // 2
        return [(part, import_csv(http, part)) for part in (rows[:half], rows[half:])]
    out = []
    for sku in dict.fromkeys(s for s, _ in rows):
        part = [(s, r) for s, r in rows if s == sku]
        batch = {"observations": [r for _, r in part]}
        out.append((part, http.post(f"/v1/products/{sku}/observations", json=batch)))
    return out


def import_csv(http: httpx.Client, rows: Rows) -> httpx.Response:
    return http.post(
        "/v1/imports",
        params={"create_products": "true"},
        content=csv_text(rows),
        headers={"content-type": "text/csv"},
    )


def run_threads(targets: list[Callable[[], None]]) -> list[BaseException]:
    errors: list[BaseException] = []

    def guarded(target: Callable[[], None]) -> None:
        try:
            target()
        except BaseException as exc:  # reported by the test, not lost in a thread
            errors.append(exc)

    threads = [threading.Thread(target=guarded, args=(t,), daemon=True) for t in targets]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join(timeout=RUN_SECONDS * 2)
        assert not thread.is_alive(), "a client thread did not finish in time"
    return errors


def stored(db: Database) -> dict[Key, dict[str, Any]]:
    engine = make_engine(db.settings)
    with engine.connect() as conn:
        rows = conn.execute(
            sa.text(
                "SELECT p.sku, o.period, o.price, o.units, o.unit_cost, o.in_stock, o.covariates "
                "FROM observations o JOIN products p ON p.id = o.product_id"
            )
        ).all()
    engine.dispose()
    out = {}
    for sku, day, price, units, cost, in_stock, covariates in rows:
        day = day if isinstance(day, str) else day.isoformat()
        if isinstance(covariates, str):
            covariates = strict_json(covariates)
        out[(sku, day)] = {
            "period": day,
            "price": price,
            "units": units,
            "unit_cost": cost,
            "in_stock": None if in_stock is None else bool(in_stock),
            "covariates": covariates or {},
        }
    return out


def test_concurrent_writers_readers_and_refit_equal_a_serial_replay(db: Database) -> None:
    settings = db.settings.model_copy(
        update={"import_chunk_rows": 40, "worker_enabled": True, "worker_poll_seconds": 0.05}
    )
    key = make_key(settings, "read", "write")
    auth = {"Authorization": f"Bearer {key}"}
    seed = [(s, values(s, week)) for s in SKUS for week in SEED_WEEKS]
    ledger = Ledger()
    barrier = threading.Barrier(WRITERS, timeout=RUN_SECONDS)
    writers_done = threading.Event()
    reads: list[tuple[str, int]] = []
    jobs: list[dict[str, Any]] = []

    with serve(create_app(settings)) as base_url:

        def client() -> httpx.Client:
            return httpx.Client(base_url=base_url, headers=auth, timeout=REQUEST_TIMEOUT)

        with client() as http:
            first = import_csv(http, seed)
            assert first.status_code == 200, first.text
            seed_inserted = strict_json(first.text)["inserted"]

        def writer(w: int) -> Callable[[], None]:
            def run() -> None:
                before, after = writer_plan(w)
                with client() as http:
                    for part, response in post_rows(http, w, before):
                        ledger.record("before", part, response)
                    barrier.wait()
                    for part, response in post_rows(http, w, after):
                        ledger.record("after", part, response)

            return run

        def reader(offset: int) -> None:
            deadline = time.monotonic() + RUN_SECONDS
            with client() as http:
                i = offset
                while not writers_done.is_set() and time.monotonic() < deadline:
                    sku = SKUS[i % len(SKUS)]
                    i += 1
                    for path in (
                        "/v1/products?limit=100",
                        f"/v1/products/{sku}/observations?limit=500",
                        f"/v1/products/{sku}/demand-model",
                    ):
                        response = http.get(path)
                        strict_json(response.text)
                        reads.append((path, response.status_code))
                    time.sleep(0.02)  # two cores: leave the writers room

        def refits() -> None:
            deadline = time.monotonic() + RUN_SECONDS
            with client() as http:
                while not writers_done.is_set() and time.monotonic() < deadline:
                    created = http.post(
                        "/v1/jobs", json={"kind": "refit", "scope": "all", "refit_unchanged": True}
                    )
                    assert created.status_code == 202, created.text
                    job_id = created.json()["id"]
                    while time.monotonic() < deadline:
                        job = strict_json(http.get(f"/v1/jobs/{job_id}").text)
                        if job["status"] not in ("queued", "running"):
                            break
                        time.sleep(0.05)
                    jobs.append(job)

        def writers() -> None:
            errors = run_threads([writer(w) for w in range(WRITERS)])
            writers_done.set()
            if errors:
                raise errors[0]

        errors = run_threads([writers, lambda: reader(0), lambda: reader(3), refits])
    assert not errors, errors

    # Every write succeeded: no "database is locked", no deadlock, no conflict.
    failed = [(phase, status, body) for phase, status, body in ledger.answers if status != 200]
    assert not failed, failed[:3]
    for path, status in reads:
        assert status == 200 or (status == 404 and path.endswith("demand-model")), (path, status)
    assert reads and jobs
    for job in jobs:
        assert job["status"] == "succeeded", job
        assert job["progress"]["done"] == job["progress"]["total"] >= len(SKUS)

    expected = ledger.replay(seed)
    actual = stored(db)
    assert len(actual) == len(expected)
    assert actual == expected
    # Each period was new to exactly one request, whatever the interleaving.
    inserted = seed_inserted + sum(body["inserted"] for _, _, body in ledger.answers)
    assert inserted == len(expected)
    sent = sum(body["rows"] for _, _, body in ledger.answers)
    assert sent == sum(body["inserted"] + body["updated"] for _, _, body in ledger.answers)
    # New products were created once, by one import, and reported by that one only.
    created = [sku for _, _, body in ledger.answers for sku in body.get("products_created", [])]
    assert sorted(created) == sorted(NEW_SKUS)
    engine = make_engine(db.settings)
    with engine.connect() as conn:
        skus = set(conn.execute(sa.text("SELECT sku FROM products")).scalars())
    engine.dispose()
    assert skus == set(ALL_SKUS)


CROWD = 28  # concurrent requests: more than the pool has connections (15 SQLite, 20 PostgreSQL)


def test_more_concurrent_writers_than_pooled_connections_all_succeed(db: Database) -> None:
    key = make_key(db.settings, "read", "write")
    auth = {"Authorization": f"Bearer {key}"}
    statuses: list[int] = []
    gate = threading.Barrier(CROWD, timeout=RUN_SECONDS)
    with (
        serve(create_app(db.settings)) as base_url,
        httpx.Client(  # thread-safe; one connection per thread
            base_url=base_url,
            headers=auth,
            timeout=REQUEST_TIMEOUT,
            limits=httpx.Limits(max_connections=CROWD),
        ) as http,
    ):
        for sku in SKUS:
            assert http.put(f"/v1/products/{sku}", json={"name": sku}).status_code == 201

        def client(i: int) -> Callable[[], None]:
            def run() -> None:
                sku = SKUS[i % len(SKUS)]
                batch = {"observations": [values(sku, i)]}
                gate.wait()
                response = http.post(f"/v1/products/{sku}/observations", json=batch)
                statuses.append(response.status_code)

            return run

        errors = run_threads([client(i) for i in range(CROWD)])
    assert not errors, errors
    assert statuses == [200] * CROWD
    assert len(stored(db)) == CROWD
