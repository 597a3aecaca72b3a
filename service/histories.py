"""Reading stored observations into the arrays the numerical library fits."""

from __future__ import annotations

import json
from collections.abc import Sequence

import numpy as np
from sqlalchemy import select
from sqlalchemy.orm import Session

from models.history import History
from service.errors import ErrorItem, InvalidInput
from service.tables import ObservationRow, ProductRow


def _covariates(raw: object) -> dict[str, float]:
    if raw is None:
        return {}
    if isinstance(raw, str):  # drivers that hand back JSON text
        return dict(json.loads(raw))
    return dict(raw)  # type: ignore[call-overload,no-any-return]


def load_history(
    session: Session, *, product: ProductRow, cross_skus: Sequence[str] = ()
) -> History:
    """One product's full history, with other products' prices aligned to its periods.

    Missing values are ``nan`` (the numerical library leaves those periods out);
    an unknown ``in_stock`` counts as in stock.
    """
    rows = session.execute(
        select(
            ObservationRow.period,
            ObservationRow.price,
            ObservationRow.units,
            ObservationRow.unit_cost,
            ObservationRow.in_stock,
            ObservationRow.covariates,
        )
        .where(ObservationRow.product_id == product.id)
        .order_by(ObservationRow.period)
    ).all()
    n = len(rows)
    periods = np.array([r.period.isoformat() for r in rows], dtype="datetime64[D]")
    covariate_values = [_covariates(r.covariates) for r in rows]
    names = sorted({name for values in covariate_values for name in values})
    covariates = {
        name: np.array([values.get(name, np.nan) for values in covariate_values], dtype=float)
        for name in names
    }
    return History(
        sku=product.sku,
        periods=periods,
        price=np.array([r.price for r in rows], dtype=float),
        units=np.array([r.units for r in rows], dtype=float),
        unit_cost=np.array(
            [np.nan if r.unit_cost is None else r.unit_cost for r in rows], dtype=float
        ),
        in_stock=np.array([r.in_stock is not False for r in rows], dtype=bool),
        covariates=covariates,
        cross_prices=_cross_prices(session, product, cross_skus, periods)
        if n
        else {sku: np.empty(0) for sku in cross_skus},
    )


def _cross_prices(
    session: Session, product: ProductRow, skus: Sequence[str], periods: np.ndarray
) -> dict[str, np.ndarray]:
    if not skus:
        return {}
    ids = dict(
        session.execute(
            select(ProductRow.sku, ProductRow.id).where(ProductRow.sku.in_(list(skus)))
        ).all()
    )
    unknown = [s for s in skus if s not in ids or s == product.sku]
    if unknown:
        raise InvalidInput(
            "cross_prices must name other products of the catalogue",
            errors=[
                ErrorItem(field="spec.cross_prices", message=f"unknown or own sku {s!r}")
                for s in unknown
            ],
        )
    position = {p: i for i, p in enumerate(periods.tolist())}
    out: dict[str, np.ndarray] = {}
    for sku in skus:
        values = np.full(periods.shape[0], np.nan)
        for period, price in session.execute(
            select(ObservationRow.period, ObservationRow.price).where(
                ObservationRow.product_id == ids[sku]
            )
        ):
            i = position.get(period)
            if i is not None:
                values[i] = price
        out[sku] = values
    return out
