"""Group commit: concurrent callers share transactions, each sees only its own outcome."""

from __future__ import annotations

import threading
import time
from collections.abc import Sequence

import pytest
import sqlalchemy as sa
from sqlalchemy.orm import Session

from service.catalogue import products
from service.core.db import make_engine, make_session_factory
from service.core.group_commit import GroupWriter
from tests.plugins.storage import Database, row_count

pytestmark = pytest.mark.storage


def _create(session: Session, skus: Sequence[str]) -> list[int]:
    ids = products.create_bare(session, skus=skus)
    return [ids[s] for s in skus]


def test_every_caller_gets_its_rows_committed(db: Database) -> None:
    engine = make_engine(db.settings)
    writer = GroupWriter(make_session_factory(engine, writer=True), _create)
    readers = make_session_factory(engine, writer=False)
    failures: list[str] = []

    def call(n: int) -> None:
        skus = [f"GC-{n:02d}-{i}" for i in range(3)]
        ids = writer.submit(skus)
        # Committed before submit returns: another session sees the rows at once.
        with readers() as session:
            seen = session.scalars(
                sa.select(products.ProductRow.id).where(products.ProductRow.sku.in_(skus))
            ).all()
        if sorted(seen) != sorted(ids) or len(ids) != 3:
            failures.append(f"caller {n}: {ids} vs {seen}")

    threads = [threading.Thread(target=call, args=(n,)) for n in range(24)]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join()
    engine.dispose()
    assert failures == []
    assert row_count(db.settings, "products") == 72


def test_one_bad_caller_fails_alone(db: Database) -> None:
    engine = make_engine(db.settings)
    first_started = threading.Event()
    release = threading.Event()

    def slow_then_create(session: Session, skus: Sequence[str]) -> list[int]:
        if skus == ["GATE"]:
            first_started.set()
            release.wait(10)  # the others queue up meanwhile and form one batch
        return _create(session, skus)

    writer = GroupWriter(make_session_factory(engine, writer=True), slow_then_create)
    outcomes: dict[str, object] = {}

    def call(skus: list[str]) -> None:
        try:
            outcomes[skus[0]] = writer.submit(skus)
        except Exception as exc:  # noqa: BLE001 - recorded for the assertions
            outcomes[skus[0]] = exc

    gate = threading.Thread(target=call, args=(["GATE"],))
    gate.start()
    assert first_started.wait(10)
    # "DUP" names a sku twice, so its insert breaks the unique constraint.
    batch = [["OK-1"], ["DUP", "DUP"], ["OK-2"]]
    threads = [threading.Thread(target=call, args=(skus,)) for skus in batch]
    for thread in threads:
        thread.start()
    deadline = time.monotonic() + 10
    while writer.pending() < len(batch) and time.monotonic() < deadline:
        time.sleep(0.01)  # wait until all three share the next batch
    release.set()
    for thread in [gate, *threads]:
        thread.join()
    engine.dispose()
    assert isinstance(outcomes["DUP"], sa.exc.IntegrityError)
    assert all(isinstance(outcomes[k], list) for k in ("GATE", "OK-1", "OK-2"))
    assert row_count(db.settings, "products") == 3
