"""The catalogue's spread of price moves, for ``decide_by: calibrated``.

How far a product's price moves toward its fitted optimum depends on how far the
catalogue's current prices sit from their best beyond the estimates' noise
(:mod:`models.pricing.calibrate`). That spread is read from the products with an active fit
and a unit cost, each priced under its own bounds (no request's constraints, no scenario),
and kept per state of those products: it is recomputed when a fit is activated or a
product's price, cost or bounds change. A large catalogue is read through an even sample of
:data:`SAMPLE` products (a spread is a catalogue-wide moment; a sample estimates it well).
"""

from __future__ import annotations

import datetime as dt
import math
from collections.abc import Callable
from typing import Final

from sqlalchemy import select
from sqlalchemy.orm import Session

from models import DemandFit, MoveEvidence, PriceConstraints, catalogue_spread
from service.core.errors import LIBRARY_ERRORS, strict_floats
from service.core.kept import Kept
from service.core.tables import FitRow, ProductRow, as_utc
from service.estimation.fit_cache import fit_cache
from service.estimation.gates import ACTIVE

_UNUSABLE: tuple[type[Exception], ...] = (KeyError, TypeError, *LIBRARY_ERRORS)
SAMPLE: Final = 200
"""Products read for the spread at most (an even sample by product id beyond that)."""
_KEPT: Final = 4

# product id, fit id, sku, unit cost, current price (nan: none), min price, max price
Row = tuple[int, int, str, float, float, float | None, float | None]
Key = tuple[tuple[Row, float], ...]
EvidenceOf = Callable[[DemandFit, float, float, PriceConstraints], MoveEvidence | None]


# The spread is wrapped in a 1-tuple: a catalogue with no spread (None) is a result too.
spread_cache: Kept[Key, tuple[float | None]] = Kept(_KEPT)


def _priced_products(session: Session) -> list[tuple[Row, dt.datetime]]:
    """Products with an active fit and a unit cost: their pricing terms and fit, by id."""
    rows = session.execute(
        select(
            ProductRow.id,
            FitRow.id,
            ProductRow.sku,
            ProductRow.unit_cost,
            ProductRow.current_price,
            ProductRow.min_price,
            ProductRow.max_price,
            FitRow.created_at,
        )
        .join(FitRow, (FitRow.product_id == ProductRow.id) & (FitRow.status == ACTIVE))
        .where(ProductRow.unit_cost.is_not(None))
        .order_by(ProductRow.id)
    ).all()
    return [
        ((r[0], r[1], r[2], float(r[3]), math.nan if r[4] is None else r[4], r[5], r[6]), r[7])
        for r in rows
        if r[3] is not None
    ]


def _sample(rows: list[tuple[Row, dt.datetime]]) -> list[tuple[Row, dt.datetime]]:
    if len(rows) <= SAMPLE:
        return rows
    step = len(rows) / SAMPLE
    return [rows[int(i * step)] for i in range(SAMPLE)]


def catalogue_move_spread(session: Session, evidence_of: EvidenceOf) -> float | None:
    """``tau^2`` of the catalogue (None with fewer than three products that can be priced).

    ``evidence_of(fit, unit_cost, current_price, constraints)`` works out one product's
    moves (the pricing use case passes it, as the one caller of the optimisers).
    """
    rows = _priced_products(session)
    key: Key = tuple((row, as_utc(created).timestamp()) for row, created in rows)
    cached = spread_cache.get(key)
    if cached is not None:
        return cached[0]
    evidence: list[MoveEvidence] = []
    for (_, fit_id, _, cost, current, low, high), created in _sample(rows):
        try:  # a record that cannot be read or priced leaves out one product
            fit = fit_cache.get(session, fit_id, created)
            price = current if math.isfinite(current) else fit.variable_latest.get("price")
            if price is None or not math.isfinite(price) or price <= 0.0:
                continue
            constraints = PriceConstraints(min_price=low, max_price=high)
            with strict_floats():  # numbers the arithmetic cannot handle raise, as in pricing
                moves = evidence_of(fit, cost, price, constraints)
        except _UNUSABLE:
            continue
        if moves is not None:
            evidence.append(moves)
    spread = catalogue_spread(evidence)
    spread_cache.put(key, (spread,))
    return spread
