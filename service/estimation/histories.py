"""Histories of products as the numerical library fits them, from stored observations.

`service.estimation.history_rows` reads a whole batch's rows into arrays with one query; here they
are split per product at the boundaries of the product id, covariates a product never
has are dropped, and other products' prices are aligned to each product's periods.
"""

from __future__ import annotations

import functools
import re
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from sqlalchemy import select
from sqlalchemy.orm import Session

from models import History
from service.core.errors import ErrorItem, InvalidInput
from service.core.schemas import NAME_PATTERN
from service.core.tables import ProductRow
from service.estimation.history_rows import RowsRead, read_rows

_PRICE_SQL = (
    "SELECT product_id, period, price FROM observations WHERE product_id IN ({ids}) "
    "ORDER BY product_id, period"
)
# Names the service accepts for covariates (ingest refuses others): only these can be
# stored, and each can be quoted as one key of an SQLite JSON path.
_EXTRACTABLE = re.compile(NAME_PATTERN)

ReadRows = Callable[[Sequence[int], list[str] | None], RowsRead]
"""Reads the rows of these product ids (covariates: these names, or all with None)."""


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


def names_to_read(covariates: Sequence[str] | None) -> list[str] | None:
    """The covariate names to have the database extract: these, or None (read whole
    documents) when a name is not one the service accepts, as no document holds it."""
    if covariates is None:
        return None
    names = list(dict.fromkeys(covariates))
    return names if all(_EXTRACTABLE.match(n) for n in names) else None


def load_histories(
    session: Session,
    products: Sequence[ProductRef],
    cross_skus: dict[str, list[str]] | None = None,
    *,
    covariates: Sequence[str] | None = None,
    rows: ReadRows | None = None,
) -> list[History]:
    """Histories of many products (in the given order), read with one query.

    Missing values are ``nan`` (the numerical library leaves those periods out); an
    unknown ``in_stock`` counts as in stock. ``cross_skus`` maps a product's sku to the
    skus whose prices enter its equation; they are aligned to its periods.

    ``covariates`` names the covariates to read (None: all of them). Either way a
    history holds a covariate only if the product has at least one value of it.
    ``rows`` reads the products' rows in place of ``session`` (a refit job's reader
    process); other products' prices are still read through ``session``.
    """
    if not products:
        return []
    keep = None if covariates is None else list(dict.fromkeys(covariates))
    names = names_to_read(covariates)
    ids = [p.id for p in products]
    if rows is None:
        dialect = session.connection().dialect.name
        rows = functools.partial(read_rows, functools.partial(_fetch, session), dialect)
    product_id, matrix, values = rows(ids, names)
    if keep is not None:
        values = {name: column for name, column in values.items() if name in keep}
    if np.isnan(matrix[:, 0]).any():
        raise ValueError("a stored period is not a date")
    periods = matrix[:, 0].astype(np.int64).astype("datetime64[D]")
    price, units, unit_cost = (np.ascontiguousarray(matrix[:, i]) for i in (1, 2, 3))
    in_stock = matrix[:, 4] != 0.0

    wanted = sorted({s for skus in (cross_skus or {}).values() for s in skus})
    cross = _price_series(session, wanted)

    ends = np.searchsorted(product_id, ids, side="right")
    starts = np.searchsorted(product_id, ids, side="left")
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
