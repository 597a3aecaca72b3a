"""Reading stored observations into the arrays the numerical library fits.

One query reads the histories of a whole batch of products; rows become numpy arrays
in bulk and are split per product at the boundaries of the product id, so the cost per
row stays a few C-level operations (a refit job is bound by reading its data).

A caller that knows which covariates it needs (a refit job: those its spec names) has
the database take them out of the stored JSON documents, so that no document is decoded
in Python: PostgreSQL hands each over as a float column; SQLite hands over all of a row's
numbers as one JSON array (one parse of the document instead of one per name), whose
text numpy reads in one call. Without names, every covariate is read from the documents
(the charts show whatever a product has).
"""

from __future__ import annotations

import json
import re
from collections.abc import Sequence
from dataclasses import dataclass, replace
from typing import Any

import numpy as np
from sqlalchemy import select
from sqlalchemy.orm import Session

from models.history import History
from service.errors import ErrorItem, InvalidInput
from service.schemas import NAME_PATTERN
from service.tables import ProductRow

# Periods as days since 1970-01-01 (exact in a double) and an unknown in_stock as in
# stock, so that every value read is a number or NULL and the rows become one float
# matrix in one call.
_DAYS = {
    "sqlite": "CAST(julianday(period) - 2440587.5 AS INTEGER)",
    "postgresql": "period - DATE '1970-01-01'",
}
_IN_STOCK = {"sqlite": "coalesce(in_stock, 1)", "postgresql": "coalesce(in_stock, TRUE)"}
# One covariate as a float column, NULL where a period has none. The JSON path (SQLite,
# where a name in double quotes is one key) or key (PostgreSQL) is a bound parameter.
_COVARIATE = {
    "sqlite": "json_extract(covariates, ?)",
    "postgresql": "(covariates ->> %s::text)::float8",
}
_FROM = "FROM observations WHERE product_id IN ({ids}) ORDER BY product_id, period"
_COUNTS = (
    "SELECT product_id, count(*) FROM observations WHERE product_id IN ({ids}) "
    "GROUP BY product_id ORDER BY product_id"
)
_PRICE_SQL = "SELECT product_id, period, price " + _FROM
# Names the service accepts for covariates (ingest refuses others): only these can be
# stored, and each can be quoted as one key of an SQLite JSON path.
_EXTRACTABLE = re.compile(NAME_PATTERN)
# What SQLite's arrays of numbers are made of, once brackets are gone and null is nan.
_NOT_NUMBER_TEXT = str.maketrans("", "", "0123456789+-.eEna,")
# An integer minus zero ("-0", which CSV imports store as sent): JSON makes it the
# integer 0, a float parser -0.0.
_MINUS_ZERO_INTEGER = re.compile(r"(?<![0-9.eE])-0(?![0-9.eE])")


@dataclass(frozen=True)
class ProductRef:
    """The little a history load needs to know about a product."""

    id: int
    sku: str


def load_history(
    session: Session, *, product: ProductRow, cross_skus: Sequence[str] = ()
) -> History:
    """One product's full history, with other products' prices aligned to its periods."""
    skus = _check_cross_skus(session, product.sku, cross_skus)
    return load_histories(session, [ProductRef(product.id, product.sku)], {product.sku: skus})[0]


def _check_cross_skus(session: Session, own: str, skus: Sequence[str]) -> list[str]:
    if not skus:
        return []
    known = set(session.scalars(select(ProductRow.sku).where(ProductRow.sku.in_(list(skus)))))
    unknown = [s for s in skus if s not in known or s == own]
    if unknown:
        raise InvalidInput(
            "cross_prices must name other products of the catalogue",
            errors=[
                ErrorItem(field="spec.cross_prices", message=f"unknown or own sku {s!r}")
                for s in unknown
            ],
        )
    return list(skus)


def load_histories(
    session: Session,
    products: Sequence[ProductRef],
    cross_skus: dict[str, list[str]] | None = None,
    *,
    covariates: Sequence[str] | None = None,
) -> list[History]:
    """Histories of many products (in the given order), read with one query.

    Missing values are ``nan`` (the numerical library leaves those periods out); an
    unknown ``in_stock`` counts as in stock. ``cross_skus`` maps a product's sku to the
    skus whose prices enter its equation; they are aligned to its periods.

    ``covariates`` names the covariates to read (None: all of them). Either way a
    history holds a covariate only if the product has at least one value of it.
    """
    if not products:
        return []
    names = None if covariates is None else list(dict.fromkeys(covariates))
    if names is not None and not all(_EXTRACTABLE.match(n) for n in names):
        # No stored document can hold such a name; read the documents (as without names).
        return [
            replace(h, covariates={k: v for k, v in h.covariates.items() if k in names})
            for h in load_histories(session, products, cross_skus)
        ]
    ids = ",".join(str(int(p.id)) for p in products)
    read = None
    if names is not None and len(names) > 1 and session.connection().dialect.name == "sqlite":
        read = _read_sqlite_arrays(session, ids, names)
    if read is None:
        read = _read_rows(session, ids, names)
    product_id, matrix, values = read
    if np.isnan(matrix[:, 0]).any():
        raise ValueError("a stored period is not a date")
    periods = matrix[:, 0].astype(np.int64).astype("datetime64[D]")
    price, units, unit_cost = (np.ascontiguousarray(matrix[:, i]) for i in (1, 2, 3))
    in_stock = matrix[:, 4] != 0.0

    wanted = sorted({s for skus in (cross_skus or {}).values() for s in skus})
    cross = _price_series(session, wanted)

    ends = np.searchsorted(product_id, [p.id for p in products], side="right")
    starts = np.searchsorted(product_id, [p.id for p in products], side="left")
    # Whether each product has any value of each covariate: counts of values before each row.
    present = {}
    for name, column in values.items():
        counted = np.concatenate(([0], np.cumsum(~np.isnan(column))))
        present[name] = (counted[ends] > counted[starts]).tolist()
    out = []
    for index, (ref, start, end) in enumerate(
        zip(products, starts.tolist(), ends.tolist(), strict=True)
    ):
        own_periods = periods[start:end]
        out.append(
            History(
                sku=ref.sku,
                periods=own_periods,
                price=price[start:end],
                units=units[start:end],
                unit_cost=unit_cost[start:end],
                in_stock=in_stock[start:end],
                covariates={
                    name: column[start:end]
                    for name, column in values.items()
                    if present[name][index]
                },
                cross_prices={
                    sku: _align(cross[sku], own_periods)
                    for sku in (cross_skus or {}).get(ref.sku, [])
                },
            )
        )
    return out


_Read = tuple[np.ndarray, np.ndarray, dict[str, np.ndarray]]
"""Product id per row; days, price, units, unit_cost, in_stock per row as a float
matrix; one float array per covariate."""


def _read_rows(session: Session, ids: str, names: list[str] | None) -> _Read:
    """The plain way: a row per observation, covariates as float columns (or documents)."""
    dialect = session.connection().dialect.name
    head = f"product_id, {_DAYS[dialect]}, price, units, unit_cost, {_IN_STOCK[dialect]}"
    if names is None:
        rows = _fetch(session, f"SELECT {head}, covariates {_FROM.format(ids=ids)}", ())
        values = _covariate_columns([row[6] for row in rows])
        rows = [row[:6] for row in rows]
        width = 6
    else:
        extracted = "".join(f", {_COVARIATE[dialect]}" for _ in names)
        params = [f'$."{name}"' for name in names] if dialect == "sqlite" else names
        rows = _fetch(session, f"SELECT {head}{extracted} {_FROM.format(ids=ids)}", params)
        width = 6 + len(names)
    # Every value is a number or NULL: one conversion makes the float matrix (NULL: nan).
    matrix = np.array(rows, dtype=np.float64).reshape(len(rows), width)
    if names is not None:
        values = {name: np.ascontiguousarray(matrix[:, 6 + i]) for i, name in enumerate(names)}
    return matrix[:, 0].astype(np.int64), matrix[:, 1:6], values


def _read_sqlite_arrays(session: Session, ids: str, names: list[str]) -> _Read | None:
    """SQLite, two covariates or more: each row's covariates as one JSON array.

    ``json_extract`` with several paths parses the document once and writes the numbers
    as they are stored, so numpy's reading of the text gives the doubles ``json.loads``
    would. The product ids come from a count per product in the same read transaction
    (one snapshot), which spares a value per row. None if a stored value is not a number
    (the plain way then reads them as it always did).
    """
    counts = _fetch(session, _COUNTS.format(ids=ids), ())
    no_values = "[" + ",".join(["null"] * len(names)) + "]"
    paths = ", ".join("?" for _ in names)
    rows = _fetch(
        session,
        f"SELECT {_DAYS['sqlite']}, price, units, unit_cost, {_IN_STOCK['sqlite']}, "
        f"coalesce(json_extract(covariates, {paths}), ?) {_FROM.format(ids=ids)}",
        [*(f'$."{name}"' for name in names), no_values],
    )
    if len(rows) != sum(n for _, n in counts):
        raise RuntimeError("observations changed within one read transaction")
    text = ",".join([row[5] for row in rows]).replace("[", "").replace("]", "")
    text = text.replace("null", "nan")
    if text.translate(_NOT_NUMBER_TEXT):
        return None
    if "-0" in text:
        text = _MINUS_ZERO_INTEGER.sub("0", text)
    numbers = np.fromstring(text, sep=",") if rows else np.empty(0)
    if numbers.size != len(rows) * len(names):
        return None
    covariates = numbers.reshape(len(rows), len(names))
    matrix = np.array([row[:5] for row in rows], dtype=np.float64).reshape(len(rows), 5)
    product_id = np.repeat(
        np.array([p for p, _ in counts], dtype=np.int64),
        np.array([n for _, n in counts], dtype=np.int64),
    )
    values = {name: np.ascontiguousarray(covariates[:, i]) for i, name in enumerate(names)}
    return product_id, matrix, values


def _fetch(session: Session, sql: str, params: Sequence[Any]) -> Sequence[Any]:
    """All rows of a query, through the driver's own cursor in the session's transaction
    (plain tuples: no result objects per row; binary values from PostgreSQL, which are
    exact and quicker to take apart than text)."""
    conn = session.connection()
    if conn.dialect.name == "postgresql":
        driver: Any = conn.connection.driver_connection
        cursor = driver.cursor(binary=True)
    else:
        cursor = conn.connection.cursor()
    try:
        cursor.execute(sql, params)
        rows: Sequence[Any] = cursor.fetchall()
        return rows
    finally:
        cursor.close()


def _dates(values: Sequence[object]) -> np.ndarray:
    if not values:
        return np.array([], dtype="datetime64[D]")
    if isinstance(values[0], str):  # SQLite keeps dates as ISO text
        return np.array(values, dtype="datetime64[D]")
    return np.array([v.isoformat() for v in values], dtype="datetime64[D]")  # type: ignore[attr-defined]


def _covariate_columns(raw: Sequence[object]) -> dict[str, np.ndarray]:
    """One float array per covariate name, ``nan`` where a period has no value."""
    if not raw:
        return {}
    if isinstance(next((v for v in raw if v is not None), None), str):
        # SQLite returns JSON text: parse every row in one call instead of one per row.
        documents = json.loads("[" + ",".join(v if v is not None else "null" for v in raw) + "]")  # type: ignore[misc]
    else:
        documents = list(raw)
    names = sorted({name for doc in documents if doc for name in doc})
    return {
        name: np.array(
            [doc.get(name, np.nan) if doc else np.nan for doc in documents], dtype=np.float64
        )
        for name in names
    }


def _price_series(
    session: Session, skus: Sequence[str]
) -> dict[str, tuple[np.ndarray, np.ndarray]]:
    if not skus:
        return {}
    id_of = dict(
        session.execute(select(ProductRow.sku, ProductRow.id).where(ProductRow.sku.in_(skus))).all()
    )
    sku_of = {v: k for k, v in id_of.items()}
    series: dict[str, tuple[np.ndarray, np.ndarray]] = {
        s: (np.array([], dtype="datetime64[D]"), np.array([])) for s in skus
    }
    if not id_of:  # none of them exists (an empty IN list is not SQL everywhere)
        return series
    ids = ",".join(str(int(i)) for i in id_of.values())
    rows = _fetch(session, _PRICE_SQL.format(ids=ids), ())
    if rows:
        pid, period, price = zip(*rows, strict=True)
        pid_array = np.array(pid)
        dates = _dates(period)
        prices = np.array(price, dtype=np.float64)
        for product in np.unique(pid_array).tolist():
            mask = pid_array == product
            series[sku_of[product]] = (dates[mask], prices[mask])
    return series


def _align(series: tuple[np.ndarray, np.ndarray], periods: np.ndarray) -> np.ndarray:
    """Another product's prices on these periods; ``nan`` where it has none."""
    their_periods, their_prices = series
    out = np.full(periods.shape[0], np.nan)
    if their_periods.size == 0 or periods.size == 0:
        return out
    position = np.clip(np.searchsorted(their_periods, periods), 0, their_periods.size - 1)
    found = their_periods[position] == periods
    out[found] = their_prices[position[found]]
    return out
