"""Reading stored observations into the arrays the numerical library fits.

One query reads the histories of a whole batch of products; columns become numpy
arrays in bulk and are split per product at the boundaries of the product id, so the
cost per row stays a few C-level operations (a refit job is bound by reading its data).
"""

from __future__ import annotations

import json
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from sqlalchemy import select
from sqlalchemy.orm import Session

from models.history import History
from service.errors import ErrorItem, InvalidInput
from service.tables import ProductRow

_SQL = (
    "SELECT product_id, period, price, units, unit_cost, in_stock, covariates "
    "FROM observations WHERE product_id IN ({ids}) ORDER BY product_id, period"
)
_PRICE_SQL = (
    "SELECT product_id, period, price FROM observations WHERE product_id IN ({ids}) "
    "ORDER BY product_id, period"
)


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
) -> list[History]:
    """Histories of many products (in the given order), read with one query.

    Missing values are ``nan`` (the numerical library leaves those periods out); an
    unknown ``in_stock`` counts as in stock. ``cross_skus`` maps a product's sku to the
    skus whose prices enter its equation; they are aligned to its periods.
    """
    if not products:
        return []
    conn = session.connection()
    ids = ",".join(str(int(p.id)) for p in products)
    rows = conn.exec_driver_sql(_SQL.format(ids=ids)).fetchall()
    columns = list(zip(*rows, strict=True)) if rows else [()] * 7
    product_id = np.array(columns[0], dtype=np.int64)
    periods = _dates(columns[1])
    price = np.array(columns[2], dtype=np.float64)
    units = np.array(columns[3], dtype=np.float64)
    unit_cost = np.array([np.nan if v is None else v for v in columns[4]], dtype=np.float64)
    in_stock = np.array([v is None or bool(v) for v in columns[5]], dtype=bool)
    covariates = _covariate_columns(columns[6])

    wanted = sorted({s for skus in (cross_skus or {}).values() for s in skus})
    cross = _price_series(session, wanted)

    starts = np.searchsorted(product_id, [p.id for p in products], side="left")
    ends = np.searchsorted(product_id, [p.id for p in products], side="right")
    out = []
    for ref, start, end in zip(products, starts.tolist(), ends.tolist(), strict=True):
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
                    name: values[start:end]
                    for name, values in covariates.items()
                    if not np.isnan(values[start:end]).all()
                },
                cross_prices={
                    sku: _align(cross[sku], own_periods)
                    for sku in (cross_skus or {}).get(ref.sku, [])
                },
            )
        )
    return out


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
    ids = ",".join(str(int(i)) for i in id_of.values())
    rows = session.connection().exec_driver_sql(_PRICE_SQL.format(ids=ids)).fetchall()
    series: dict[str, tuple[np.ndarray, np.ndarray]] = {
        s: (np.array([], dtype="datetime64[D]"), np.array([])) for s in skus
    }
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
