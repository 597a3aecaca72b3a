"""Reading histories with named covariates gives exactly what reading the documents gives.

A refit job names the covariates its spec uses, and the database takes them out of the
stored JSON documents (a float column per name on PostgreSQL; one JSON array per row on
SQLite, read by numpy). The reference is the plain read without names, which decodes
every document with Python's own JSON decoder (``json.loads``, correctly rounded, as
``float()`` is), keeping only the names asked for. The numbers below are chosen to be
hard to carry through text: the shortest representations of neighbouring doubles, a
decimal with more digits than a double holds, the extremes of the double range, an
integer beyond 2**64, exponents in capitals, and both spellings of minus zero (JSON
makes ``-0`` the integer 0 but ``-0.0`` the float minus zero).
"""

from __future__ import annotations

import json
import math
import os
import signal
import sqlite3
from collections.abc import Iterator, Sequence
from pathlib import Path

import numpy as np
import pytest
from sqlalchemy import make_url

from models import History
from service.catalogue import products
from service.catalogue.observations import ObservationTuple, observation_writer
from service.core.db import make_engine, make_session_factory, session_scope
from service.estimation.histories import ProductRef, load_histories
from service.estimation.history_reader import HistoryReader, ReaderFailed
from tests.plugins.storage import Database

pytestmark = pytest.mark.storage

HARD_NUMBERS = [
    repr(1.0),
    repr(float(np.nextafter(1.0, 2.0))),
    repr(float(np.nextafter(0.1, 1.0))),
    "0.1000000000000000055511151231257827021181583404541015625",
    "2.2250738585072014e-308",
    "5e-324",
    "1.7976931348623157e308",
    "123456789012345678901234567890",
    "1E+05",
    "-2.5e-07",
    "-0",
    "-0.0",
    "0",
]
WEEKS = [f"2025-{month:02d}-{day:02d}" for month in (1, 2, 3, 4) for day in (6, 13, 20, 27)]


def _documents() -> list[str | None]:
    """One covariate document per week of the first product: the hard numbers in turn
    under "a" and "b.c-d" (a name a JSON path would split if it were not quoted), then
    weeks without them."""
    docs: list[str | None] = []
    for i, week in enumerate(WEEKS[: len(HARD_NUMBERS)]):
        number = HARD_NUMBERS[i]
        other = HARD_NUMBERS[(i + 4) % len(HARD_NUMBERS)]
        docs.append(f'{{"a":{number},"b.c-d":{other},"z":{int(week[-2:])}}}')
    docs += [None, "{}", '{"b.c-d":7.25}']  # nothing; an empty document; "a" missing
    assert len(docs) == len(WEEKS)
    return docs


@pytest.fixture
def stored(db: Database) -> Iterator[tuple[Database, list[ProductRef]]]:
    """Four products: full documents; none stored; only "a" in a few weeks; unknown costs
    and stock flags with a document spelled with spaces and another key order."""
    engine = make_engine(db.settings)
    with session_scope(make_session_factory(engine, writer=True)) as session:
        ids = products.create_bare(session, skus=["H-FULL", "H-EMPTY", "H-SPARSE", "H-ODD"])
        writer = observation_writer(session)
        rows: list[ObservationTuple] = []
        for i, (week, doc) in enumerate(zip(WEEKS, _documents(), strict=True)):
            rows.append((ids["H-FULL"], week, 4.0 + i / 8, 10.0 + i, 2.0, True, doc))
        for i, week in enumerate(WEEKS[:6]):
            doc = '{"a":3.5}' if i in (1, 4) else '{"z":1.0}'
            rows.append((ids["H-SPARSE"], week, 5.5, 20.0 - i, None, None, doc))
        for i, week in enumerate(WEEKS[2:9]):
            doc = '{ "z" : 2.0 , "a" : -1.25E-3 }' if i % 2 else '{"a": 0.3, "b.c-d": 1e2}'
            rows.append((ids["H-ODD"], week, 3.25, 8.0, None if i == 2 else 1.5, i != 4, doc))
        writer.write(rows)
    refs = [ProductRef(ids[s], s) for s in ("H-SPARSE", "H-FULL", "H-EMPTY", "H-ODD")]
    yield db, refs
    engine.dispose()


def _read(
    db: Database,
    refs: Sequence[ProductRef],
    names: Sequence[str] | None,
    cross: dict[str, list[str]] | None = None,
) -> list[History]:
    engine = make_engine(db.settings)
    try:
        with session_scope(make_session_factory(engine, writer=False)) as session:
            return load_histories(session, refs, cross, covariates=names)
    finally:
        engine.dispose()


def _same_floats(got: np.ndarray, want: np.ndarray) -> None:
    """Equal as doubles: value, nan where nan, and the sign of zero."""
    np.testing.assert_array_equal(got, want)
    np.testing.assert_array_equal(np.signbit(got), np.signbit(want))
    assert got.dtype == want.dtype == np.float64


def _assert_same(got: History, want: History, names: Sequence[str]) -> None:
    assert got.sku == want.sku
    np.testing.assert_array_equal(got.periods, want.periods)
    assert got.periods.dtype == want.periods.dtype
    for field in ("price", "units", "unit_cost"):
        _same_floats(getattr(got, field), getattr(want, field))
    np.testing.assert_array_equal(got.in_stock, want.in_stock)
    assert got.in_stock.dtype == want.in_stock.dtype == np.bool_
    expected = {k: v for k, v in want.covariates.items() if k in names}
    assert got.covariates.keys() == expected.keys()
    for name, values in expected.items():
        _same_floats(got.covariates[name], values)
    assert got.cross_prices.keys() == want.cross_prices.keys()
    for sku, values in want.cross_prices.items():
        _same_floats(got.cross_prices[sku], values)


@pytest.mark.parametrize(
    "names",
    [
        ["a", "b.c-d"],  # SQLite: one array per row
        ["b.c-d", "a", "a", "z"],  # repeated names count once
        ["a"],  # one name: a float column
        ["missing", "a"],  # a name no document has
        [],
        ["a b", "a"],  # not a name the service stores: read from the documents
    ],
)
def test_named_covariates_equal_the_documents(
    stored: tuple[Database, list[ProductRef]], names: list[str]
) -> None:
    db, refs = stored
    plain = _read(db, refs, None)
    named = _read(db, refs, names)
    assert [h.sku for h in named] == ["H-SPARSE", "H-FULL", "H-EMPTY", "H-ODD"]
    for got, want in zip(named, plain, strict=True):
        _assert_same(got, want, names)


def test_documents_read_as_python_decodes_them(
    stored: tuple[Database, list[ProductRef]],
) -> None:
    """The reference itself: the hard numbers arrive as ``json.loads`` makes them (on
    PostgreSQL after jsonb's own normalisation, which has no minus zero)."""
    db, refs = stored
    sparse, full, empty, odd = _read(db, refs, ["a", "b.c-d", "z"])
    want = [json.loads(doc).get("a", math.nan) if doc else math.nan for doc in _documents()]
    got = full.covariates["a"]
    for g, w in zip(got.tolist(), want, strict=True):
        if math.isnan(w):
            assert math.isnan(g)
        else:
            assert g == float(w)
            if db.backend == "sqlite":
                assert math.copysign(1.0, g) == math.copysign(1.0, float(w))
    assert full.covariates["z"][0] == 6.0 and np.isnan(full.covariates["z"][-3:]).all()
    assert got[HARD_NUMBERS.index("-0")] == 0.0
    assert not np.signbit(got[HARD_NUMBERS.index("-0")])  # JSON's integer zero
    assert got[3] == 0.1  # the long decimal is the double nearest to it
    assert got[7] == 1.2345678901234568e29
    assert empty.n_periods == 0 and empty.covariates == {}
    assert sparse.covariates.keys() == {"a", "z"}  # "b.c-d" is never there
    np.testing.assert_array_equal(sparse.covariates["a"][[1, 4]], [3.5, 3.5])
    assert np.isnan(sparse.unit_cost).all() and sparse.in_stock.all()  # unknown: in stock
    assert odd.covariates["a"][1] == -1.25e-3 and odd.covariates["b.c-d"][0] == 100.0
    assert list(odd.in_stock) == [True, True, True, True, False, True, True]
    assert math.isnan(odd.unit_cost[2]) and odd.unit_cost[0] == 1.5
    assert str(odd.periods[0]) == WEEKS[2]


def test_cross_prices_are_aligned_whichever_way_covariates_are_read(
    stored: tuple[Database, list[ProductRef]],
) -> None:
    db, refs = stored
    cross = {"H-ODD": ["H-FULL", "H-SPARSE"], "H-FULL": ["H-ODD"]}
    plain = _read(db, refs, None, cross)
    named = _read(db, refs, ["a", "b.c-d"], cross)
    for got, want in zip(named, plain, strict=True):
        _assert_same(got, want, ["a", "b.c-d"])
    odd = named[3]
    assert odd.cross_prices["H-FULL"][0] == 4.0 + 2 / 8  # same week, the full tin's price
    assert np.isnan(odd.cross_prices["H-SPARSE"][-1])  # the sparse tin stopped earlier


def test_a_cross_sku_that_does_not_exist_reads_as_no_prices(
    stored: tuple[Database, list[ProductRef]],
) -> None:
    db, refs = stored
    [full] = _read(db, refs[1:2], ["a"], {"H-FULL": ["NOT-THERE"]})
    assert np.isnan(full.cross_prices["NOT-THERE"]).all()


def test_no_products_read_nothing(stored: tuple[Database, list[ProductRef]]) -> None:
    db, _ = stored
    assert _read(db, [], ["a", "b.c-d"]) == []


def test_sqlite_reads_a_value_that_is_not_a_number_as_before(db: Database) -> None:
    """Ingest stores numbers only; a document written some other way still reads as the
    documents read (a JSON true is 1), through the float columns instead of the arrays."""
    if db.backend != "sqlite":
        pytest.skip("PostgreSQL converts each value itself and refuses a non-number")
    engine = make_engine(db.settings)
    with session_scope(make_session_factory(engine, writer=True)) as session:
        ids = products.create_bare(session, skus=["H-BOOL"])
        observation_writer(session).write(
            [
                (ids["H-BOOL"], WEEKS[0], 4.0, 9.0, None, True, '{"a":true,"b":2.5}'),
                (ids["H-BOOL"], WEEKS[1], 4.5, 8.0, None, True, '{"a":false,"b":[1]}'),
            ]
        )
    engine.dispose()
    refs = [ProductRef(ids["H-BOOL"], "H-BOOL")]
    with pytest.raises((TypeError, ValueError)):
        _read(db, refs, None)  # the nested list is no number either way
    engine = make_engine(db.settings)
    with session_scope(make_session_factory(engine, writer=True)) as session:
        session.connection().exec_driver_sql(
            'UPDATE observations SET covariates = \'{"a":false,"b":1}\' '
            f"WHERE product_id = {ids['H-BOOL']} AND covariates LIKE '%[1]%'"
        )
    engine.dispose()
    [named] = _read(db, refs, ["a", "b"])
    [plain] = _read(db, refs, None)
    _assert_same(named, plain, ["a", "b"])
    assert named.covariates["a"].tolist() == [1.0, 0.0]
    reader = HistoryReader(str(make_url(db.settings.database_url).database), 1000)
    try:
        reader.ask([ids["H-BOOL"]], ["a", "b"])
        answer = reader.answer()
    finally:
        reader.close()
    engine = make_engine(db.settings)
    with session_scope(make_session_factory(engine, writer=False)) as session:
        [through] = load_histories(session, refs, covariates=["a", "b"], rows=lambda i, n: answer)
    engine.dispose()
    _assert_same(through, plain, ["a", "b"])


@pytest.mark.parametrize("names", [["a", "b.c-d", "z"], ["a"], None])
def test_a_reader_process_reads_what_this_process_reads(
    stored: tuple[Database, list[ProductRef]], names: list[str] | None
) -> None:
    """A refit job on SQLite has reader processes read its rows: the arrays that come
    back through the pipe are the doubles this process reads, minus zero included."""
    db, refs = stored
    if db.backend != "sqlite":
        pytest.skip("reader processes serve SQLite only")
    path = make_url(db.settings.database_url).database
    assert path
    reader = HistoryReader(path, db.settings.sqlite_busy_timeout_ms)
    try:
        for _ in range(2):  # one process answers request after request
            reader.ask([r.id for r in refs], names)
        answers = [reader.answer(), reader.answer()]
    finally:
        reader.close()
    want = _read(db, refs, names)
    engine = make_engine(db.settings)
    for answer in answers:
        with session_scope(make_session_factory(engine, writer=False)) as session:
            got = load_histories(
                session, refs, covariates=names, rows=lambda ids, n, rows=answer: rows
            )
        for g, w in zip(got, want, strict=True):
            _assert_same(g, w, list(w.covariates) if names is None else names)
    engine.dispose()


def test_a_reader_process_says_why_it_could_not_read(tmp_path: Path) -> None:
    empty = tmp_path / "not-marginal.db"
    sqlite3.connect(empty).close()
    reader = HistoryReader(str(empty), 1000)
    try:
        reader.ask([1, 2], ["a", "b"])
        with pytest.raises(ReaderFailed, match="no such table: observations"):
            reader.answer()
        reader.ask([1], None)  # it goes on answering
        with pytest.raises(ReaderFailed, match="no such table"):
            reader.answer()
    finally:
        reader.close()


def test_a_reader_process_that_died_is_reported(tmp_path: Path) -> None:
    reader = HistoryReader(str(tmp_path / "x.db"), 1000)
    try:
        os.kill(reader.pid, signal.SIGKILL)
        reader.wait_for_exit()
        with pytest.raises(ReaderFailed, match="reader process"):
            reader.ask([1], None)
            reader.answer()
    finally:
        reader.close()


def test_a_reader_process_ends_when_its_input_closes(tmp_path: Path) -> None:
    reader = HistoryReader(str(tmp_path / "x.db"), 1000)
    reader.no_more_requests()
    assert reader.wait_for_exit() == 0
    reader.close()
