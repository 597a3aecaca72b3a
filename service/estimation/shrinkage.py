"""Borrowing strength across the catalogue: a product's fit with its own-price effect shrunk.

The use case behind the ``shrunk`` part of ``GET .../elasticities``, and the function pricing
can call for a shrunk fit (``shrunk_active_fit``). Every active fit of the catalogue takes
part, each product toward its family (a product without a family toward the catalogue
alone) and the catalogue; the result depends only on the set of active fits and families, so it
is kept per set and recomputed only when a fit is activated or a family changes.
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Final

from sqlalchemy import select
from sqlalchemy.orm import Session

from models import DemandFit, ElasticityRow, Shrinkage, ShrunkElasticity, shrink_own_price
from service.core.kept import Kept
from service.core.tables import FitRow, ProductRow, as_utc
from service.estimation import answers
from service.estimation.fits import active_fit
from service.estimation.gates import ACTIVE

_KEPT: Final = 4
"""Shrinkage results kept (one per set of active fits; the newest set is the one asked for)."""
_CHUNK: Final = 500


@dataclass(frozen=True)
class ShrunkFit:
    """A product's active fit and its shrunk copy.

    ``shrunk`` is None (and ``fit`` the product's own) when no shrinkage could be made:
    ``reason`` then says why.
    """

    fit_id: int
    own: DemandFit
    fit: DemandFit
    shrunk: ShrunkElasticity | None
    catalogue_mean: float | None
    n_products: int
    reason: str | None = None


Key = tuple[tuple[int, str, str | None], ...]


shrinkage_cache: Kept[Key, CatalogueShrinkage] = Kept(_KEPT)
"""Shrinkage results by the set of active fits (id, creation time, family) they came from."""


def _active_fits(session: Session) -> list[tuple[int, dt.datetime, str, str | None]]:
    """Every active fit of the catalogue: id, creation time, sku and family, by fit id."""
    rows = session.execute(
        select(FitRow.id, FitRow.created_at, ProductRow.sku, ProductRow.family)
        .join(ProductRow, ProductRow.id == FitRow.product_id)
        .where(FitRow.status == ACTIVE)
        .order_by(FitRow.id)
    ).all()
    return [(r.id, r.created_at, r.sku, r.family) for r in rows]


def _restore(session: Session, ids: Sequence[int]) -> dict[int, DemandFit | None]:
    """The fits of ``ids``, read in chunks; a record that cannot be restored is None."""
    out: dict[int, DemandFit | None] = {}
    for start in range(0, len(ids), _CHUNK):
        chunk = list(ids[start : start + _CHUNK])
        for fit_id, result in session.execute(
            select(FitRow.id, FitRow.result).where(FitRow.id.in_(chunk))
        ):
            try:
                out[fit_id] = DemandFit.from_dict(result)
            except (KeyError, TypeError, ValueError):
                out[fit_id] = None  # one unreadable record leaves out one product
    return out


@dataclass(frozen=True)
class CatalogueShrinkage:
    """Shrinkage over every active fit (or why there is none) and the fits it used, by sku."""

    result: Shrinkage | None
    reason: str | None
    fit_ids: dict[str, int]


def catalogue_shrinkage(session: Session) -> CatalogueShrinkage:
    """Shrinkage over every active fit, or the reason there is none (kept per set of fits)."""
    active = _active_fits(session)
    key: Key = tuple(
        (fit_id, as_utc(created).isoformat(), family) for fit_id, created, _, family in active
    )
    cached = shrinkage_cache.get(key)
    if cached is not None:
        return cached
    restored = _restore(session, [fit_id for fit_id, *_ in active])
    fits = [f for fit_id, *_ in active if (f := restored.get(fit_id)) is not None]
    families = {sku: family for _, _, sku, family in active if family}
    ids = {sku: fit_id for fit_id, _, sku, _ in active}
    try:
        found = CatalogueShrinkage(shrink_own_price(fits, families=families), None, ids)
    except (ValueError, ArithmeticError) as error:  # the own answers stand without it
        found = CatalogueShrinkage(None, str(error), ids)
    shrinkage_cache.put(key, found)
    return found


def shrunk_active_fit(session: Session, *, product: ProductRow) -> ShrunkFit:
    """The product's active fit shrunk toward its family and the catalogue.

    Raises what :func:`service.estimation.fits.active_fit` raises when the product has
    no active fit; a catalogue that cannot be shrunk gives the product's own fit with
    the reason.
    """
    for _ in range(2):  # a fit activated between the two reads: read both again, once
        fit_id, own = active_fit(session, product)
        found = catalogue_shrinkage(session)
        if found.fit_ids.get(product.sku) == fit_id:
            break
    else:
        reason = "the catalogue's active fits changed while they were read; ask again"
        return ShrunkFit(fit_id, own, own, None, None, 0, reason)
    result = found.result
    if result is None:
        return ShrunkFit(fit_id, own, own, None, None, 0, reason=found.reason)
    try:
        row = result.product(product.sku)
        fit = result.fit(product.sku)
    except KeyError:
        reason = f"the own-price elasticity of {product.sku!r} could not be read from its fit"
        count = len(result.products)
        return ShrunkFit(fit_id, own, own, None, result.catalogue_mean, count, reason)
    return ShrunkFit(fit_id, own, fit, row, result.catalogue_mean, len(result.products))


def own_row_at(found: ShrunkFit, *, at: str) -> ElasticityRow | None:
    """The own-price elasticity of the shrunk fit at the point ``at`` (None: not shrunk)."""
    if found.shrunk is None:
        return None
    return answers.elasticities_at(found.fit, at=at, income_like=()).report.own
