"""The price record and the audit log as stored: the prior price against a brute-force
reading of the record, the record's spans, and the database refusing changes to either."""

from __future__ import annotations

import datetime as dt
import random
from collections.abc import Iterator

import pytest
import sqlalchemy as sa
from sqlalchemy.orm import Session

from service.core.audit import write_audit
from service.core.db import make_engine, make_session_factory, session_scope
from service.core.errors import Conflict
from service.core.tables import ProductRow
from service.pricing import price_record
from tests.plugins.storage import Database

pytestmark = pytest.mark.storage

ZONES = [
    dt.UTC,
    dt.timezone(dt.timedelta(hours=-8)),
    dt.timezone(dt.timedelta(hours=5, minutes=30)),
    dt.timezone(dt.timedelta(hours=13, minutes=45)),
]
BASE = dt.datetime(2026, 3, 1, tzinfo=dt.UTC)


@pytest.fixture
def sessions(db: Database) -> Iterator[tuple[Database, sa.orm.sessionmaker[Session]]]:
    engine = make_engine(db.settings)
    yield db, make_session_factory(engine, writer=True)
    engine.dispose()


def _product(session: Session, sku: str) -> int:
    row = ProductRow(sku=sku, name=sku, currency="EUR")
    session.add(row)
    session.flush()
    return row.id


def brute_force_prior(
    starts: list[tuple[dt.datetime, float]], at: dt.datetime, days: int = 30
) -> float | None:
    """Walk every entry's span [start, next start) and keep those that meet [at - days, at):
    the definition of article 6a of Directive 98/6/EC (as amended by Directive (EU)
    2019/2161), "the lowest price applied ... during a period of time not shorter than 30
    days prior to the application of the price reduction", read over half-open spans."""
    ordered = sorted(starts)
    window_start = at - dt.timedelta(days=days)
    seen: list[float] = []
    for i, (start, price) in enumerate(ordered):
        end = ordered[i + 1][0] if i + 1 < len(ordered) else None
        if start < at and (end is None or end > window_start):
            seen.append(price)
    return min(seen) if seen else None


def test_prior_lowest_price_equals_brute_force(
    sessions: tuple[Database, sa.orm.sessionmaker[Session]],
) -> None:
    _, factory = sessions
    rng = random.Random(20261203)
    for case in range(12):
        with session_scope(factory) as session:
            product_id = _product(session, f"record-{case}")
            moments = sorted(
                {
                    BASE
                    + dt.timedelta(hours=rng.randrange(0, 24 * 120), seconds=rng.choice([0, 1]))
                    for _ in range(rng.randrange(1, 15))
                }
            )
            starts = [(m, round(rng.uniform(2.0, 9.0), 2)) for m in moments]
            for moment, price in starts:
                zone = rng.choice(ZONES)
                price_record.add_entry(
                    session,
                    product_id=product_id,
                    price=price,
                    effective_from=moment.astimezone(zone),
                    set_by_key_id=None,
                )
        # Moments to ask about: random ones, and each start exactly 30 days on, a second
        # before and after (a price stopping or starting at the window's edge), and the
        # starts themselves (a price starting at the asked moment is not prior).
        asks = [BASE + dt.timedelta(hours=rng.uniform(-48, 24 * 160)) for _ in range(20)]
        for moment, _ in starts:
            for shift in (dt.timedelta(0), dt.timedelta(seconds=1), -dt.timedelta(seconds=1)):
                asks.append(moment + dt.timedelta(days=30) + shift)
                asks.append(moment + shift)
        with session_scope(factory) as session:
            for at in asks:
                zone = rng.choice(ZONES)
                expected = brute_force_prior(starts, at)
                got = price_record.prior_lowest_price(session, product_id, at.astimezone(zone))
                assert got == expected, (case, at, starts)


def test_spans_live_price_and_last_change(
    sessions: tuple[Database, sa.orm.sessionmaker[Session]],
) -> None:
    _, factory = sessions
    first, second = BASE, BASE + dt.timedelta(days=3)
    with session_scope(factory) as session:
        product_id = _product(session, "spans")
        price_record.add_entry(
            session, product_id=product_id, price=5.0, effective_from=first, set_by_key_id="k1"
        )
        # Given in another zone: the same moment as second.
        price_record.add_entry(
            session,
            product_id=product_id,
            price=4.5,
            effective_from=second.astimezone(ZONES[1]),
            set_by_key_id=None,
            policy_id=7,
        )
    with session_scope(factory) as session:
        record = price_record.entries(session, product_id)
        assert [(e.price, e.effective_from, e.effective_to) for e in record] == [
            (5.0, first, second),
            (4.5, second, None),
        ]
        assert record[1].policy_id == 7
        before = price_record.live_price(session, product_id, second - dt.timedelta(seconds=1))
        assert before is not None and before.price == 5.0
        at_change = price_record.live_price(session, product_id, second)
        assert at_change is not None and at_change.price == 4.5
        assert price_record.live_price(session, product_id, first - dt.timedelta(1)) is None
        assert price_record.last_change(session, product_id, second) == second
        assert price_record.last_change(session, product_id, second - dt.timedelta(1)) == first


def test_record_is_only_extended(
    sessions: tuple[Database, sa.orm.sessionmaker[Session]],
) -> None:
    _, factory = sessions
    with session_scope(factory) as session:
        product_id = _product(session, "extend")
        price_record.add_entry(
            session, product_id=product_id, price=5.0, effective_from=BASE, set_by_key_id=None
        )
    for start in (BASE, BASE - dt.timedelta(hours=1)):
        with pytest.raises(Conflict), session_scope(factory) as session:
            price_record.add_entry(
                session, product_id=product_id, price=4.0, effective_from=start, set_by_key_id=None
            )


def test_database_refuses_changes_to_record_and_audit(
    sessions: tuple[Database, sa.orm.sessionmaker[Session]],
) -> None:
    db, factory = sessions
    with session_scope(factory) as session:
        product_id = _product(session, "locked")
        price_record.add_entry(
            session, product_id=product_id, price=5.0, effective_from=BASE, set_by_key_id=None
        )
        write_audit(session, actor_key_id=None, action="test", subject="locked", details={})
    statements = [
        "UPDATE price_entries SET price = 1",
        "UPDATE audit_entries SET action = 'x'",
        "DELETE FROM audit_entries",  # on both databases since step 0011
    ]
    for statement in statements:
        with pytest.raises(sa.exc.DatabaseError), session_scope(factory) as session:
            session.execute(sa.text(statement))
