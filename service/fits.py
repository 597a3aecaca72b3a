"""Fit records: fitting a product now, the quality gates, versions and activation."""

from __future__ import annotations

import datetime as dt
import functools
import threading
from collections import OrderedDict
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

from sqlalchemy import Text, and_, bindparam, column, func, insert, select, table, update
from sqlalchemy.orm import Session

from models import (
    DemandFit,
    InsufficientDataError,
    ModelSpec,
    SpecError,
    UnusableDataError,
    fit_demand,
    fit_many,
    pool_family,
)
from service import histories, json_text, metrics, products
from service.errors import ErrorItem, InvalidInput, NotFound
from service.numeric import NUMERIC_FAILURES, strict_floats, unusable
from service.settings import Settings
from service.tables import FitRow, ProductRow, as_utc, utcnow

ACTIVE, SUPERSEDED, REJECTED = "active", "superseded", "rejected"


@dataclass(frozen=True)
class GateResult:
    name: str
    passed: bool
    detail: str

    def to_dict(self) -> dict[str, Any]:
        return {"name": self.name, "passed": self.passed, "detail": self.detail}


def parse_spec(raw: dict[str, Any] | None, *, field_prefix: str = "spec") -> ModelSpec:
    try:
        return ModelSpec.from_dict(raw or {})
    except SpecError as exc:
        raise InvalidInput(
            "the model specification is invalid",
            errors=[
                ErrorItem(
                    field=f"{field_prefix}.{name}" if name != "spec" else field_prefix,
                    message=message,
                )
                for name, message in exc.problems
            ],
        ) from None


def quality_gates(
    fit: DemandFit, active_holdout_wape: float | None, settings: Settings
) -> list[GateResult]:
    """The checks a fit must pass to become the product's active fit."""
    own = fit.own_price
    gates = [
        GateResult(
            "expected_sign",
            own.estimate < 0,
            f"own-price coefficient {own.estimate:.4g} "
            + (
                "is negative, as demand should fall when price rises"
                if own.estimate < 0
                else "is not negative: demand would not fall when price rises"
            ),
        ),
        GateResult(
            "price_variation",
            not any(w.code == "low_price_variation" for w in fit.warnings),
            "the own price varied enough to identify its effect"
            if not any(w.code == "low_price_variation" for w in fit.warnings)
            else "the own price barely varied, so its effect cannot be told apart from noise",
        ),
        GateResult(
            "enough_observations",
            fit.quality.n_obs >= settings.gate_min_observations,
            f"{fit.quality.n_obs} observations (at least {settings.gate_min_observations} needed)",
        ),
    ]
    new_wape, old_wape = fit.quality.holdout_wape, active_holdout_wape
    if new_wape is None or old_wape is None:
        gates.append(
            GateResult(
                "holdout_not_worse", True, "no hold-out comparison with an active fit was possible"
            )
        )
    else:
        limit = old_wape * (1 + settings.gate_holdout_margin)
        gates.append(
            GateResult(
                "holdout_not_worse",
                new_wape <= limit,
                f"hold-out WAPE {new_wape:.4f} against the active fit's {old_wape:.4f} "
                f"(limit {limit:.4f})",
            )
        )
    return gates


def active_row(session: Session, *, product_id: int) -> FitRow | None:
    return session.scalar(
        select(FitRow).where(FitRow.product_id == product_id, FitRow.status == ACTIVE)
    )


def active_or_raise(session: Session, *, product: ProductRow) -> FitRow:
    row = active_row(session, product_id=product.id)
    if row is None:
        raise NotFound(
            f"product {product.sku!r} has no active fit; fit one with POST "
            f"/v1/products/{product.sku}/fits"
        )
    return row


_CACHE_SIZE = 2048


class FitCache:
    """Restored fits, keyed by fit id and creation time.

    Fit records never change, so an entry never goes stale; the creation time guards
    against a database that reuses the id of a deleted record (SQLite can).
    """

    def __init__(self, size: int = _CACHE_SIZE) -> None:
        self.size = size
        self._items: OrderedDict[tuple[int, str], DemandFit] = OrderedDict()
        self._lock = threading.Lock()

    def get(self, session: Session, fit_id: int, created_at: dt.datetime) -> DemandFit:
        key = (fit_id, as_utc(created_at).isoformat())
        with self._lock:
            fit = self._items.get(key)
            if fit is not None:
                self._items.move_to_end(key)
                return fit
        result = session.scalar(select(FitRow.result).where(FitRow.id == fit_id))
        if result is None:
            raise NotFound(f"no fit {fit_id}")
        fit = DemandFit.from_dict(result)
        with self._lock:
            self._items[key] = fit
            while len(self._items) > self.size:
                self._items.popitem(last=False)
        return fit


fit_cache = FitCache()


@dataclass(frozen=True)
class PricingTerms:
    """What pricing needs of a product row (read without building an ORM object)."""

    id: int
    sku: str
    unit_cost: float | None
    current_price: float | None
    min_price: float | None
    max_price: float | None


_PRODUCT_WITH_ACTIVE_FIT = (
    select(
        ProductRow.id,
        ProductRow.sku,
        ProductRow.unit_cost,
        ProductRow.current_price,
        ProductRow.min_price,
        ProductRow.max_price,
        FitRow.id.label("fit_id"),
        FitRow.created_at.label("fit_created_at"),
    )
    .outerjoin(FitRow, and_(FitRow.product_id == ProductRow.id, FitRow.status == ACTIVE))
    .where(ProductRow.sku == bindparam("sku"))
)


def product_with_active_fit(session: Session, sku: str) -> tuple[PricingTerms, int, DemandFit]:
    """A product's pricing terms, its active fit's id and the fit, read with one query
    (the hot path of every recommendation)."""
    found = session.connection().execute(_PRODUCT_WITH_ACTIVE_FIT, {"sku": sku}).first()
    if found is None:
        raise NotFound(f"no product with sku {sku!r}")
    product = PricingTerms(
        id=found.id,
        sku=found.sku,
        unit_cost=found.unit_cost,
        current_price=found.current_price,
        min_price=found.min_price,
        max_price=found.max_price,
    )
    if found.fit_id is None:
        raise _no_active_fit(product)
    return product, found.fit_id, fit_cache.get(session, found.fit_id, found.fit_created_at)


def _no_active_fit(product: ProductRow | PricingTerms) -> NotFound:
    return NotFound(
        f"product {product.sku!r} has no active fit; fit one with POST "
        f"/v1/products/{product.sku}/fits"
    )


def active_fit(session: Session, product: ProductRow) -> tuple[int, DemandFit]:
    """The active fit's id and the fit itself (restored once, then cached)."""
    found = session.execute(
        select(FitRow.id, FitRow.created_at).where(
            FitRow.product_id == product.id, FitRow.status == ACTIVE
        )
    ).first()
    if found is None:
        raise _no_active_fit(product)
    return found.id, fit_cache.get(session, found.id, found.created_at)


def get_or_raise(session: Session, *, product: ProductRow, fit_id: int) -> FitRow:
    row = session.get(FitRow, fit_id)
    if row is None or row.product_id != product.id:
        raise NotFound(f"product {product.sku!r} has no fit {fit_id}")
    return row


def list_page(
    session: Session, *, product_id: int, limit: int, before_version: int | None
) -> tuple[list[FitRow], bool]:
    """Newest first."""
    query = (
        select(FitRow)
        .where(FitRow.product_id == product_id)
        .order_by(FitRow.version.desc())
        .limit(limit + 1)
    )
    if before_version is not None:
        query = query.where(FitRow.version < before_version)
    rows = list(session.scalars(query))
    return rows[:limit], len(rows) > limit


def restore(row: FitRow) -> DemandFit:
    return DemandFit.from_dict(row.result)


def record_fit(
    session: Session, *, product: ProductRow, fit: DemandFit, settings: Settings
) -> FitRow:
    """Store a new version; activate it if it passes the gates (atomically), else reject it."""
    previous = active_row(session, product_id=product.id)
    gates = quality_gates(fit, previous.holdout_wape if previous else None, settings)
    passed = all(g.passed for g in gates)
    version = (
        session.scalar(select(func.max(FitRow.version)).where(FitRow.product_id == product.id)) or 0
    ) + 1
    if passed and previous is not None:
        session.execute(update(FitRow).where(FitRow.id == previous.id).values(status=SUPERSEDED))
    row = FitRow(**row_values(product_id=product.id, version=version, fit=fit, gates=gates))
    session.add(row)
    session.flush()
    return row


def row_values(
    *,
    product_id: int,
    version: int,
    fit: DemandFit,
    gates: list[GateResult],
    job_id: int | None = None,
    encoded: bool = False,
    result_json: str | None = None,
) -> dict[str, Any]:
    """The columns of a new fit record; active only if every gate passed.

    ``encoded``: the JSON columns as JSON text, for :func:`insert_rows`; ``result_json``
    is the fit's :func:`encode_result` when the caller has it already.
    """
    passed = all(g.passed for g in gates)
    gates_record = {"passed": passed, "checks": [g.to_dict() for g in gates]}
    if encoded:
        spec: Any = _spec_json(fit.spec)
        result: Any = result_json if result_json is not None else encode_result(fit)
        gates_column: Any = json_text.dumps(gates_record)
    else:
        spec, result, gates_column = fit.spec.to_dict(), fit.to_dict(), gates_record
    return {
        "product_id": product_id,
        "version": version,
        "status": ACTIVE if passed else REJECTED,
        "form": fit.form,
        "spec": spec,
        "result": result,
        "gates": gates_column,
        "n_obs": fit.quality.n_obs,
        "holdout_wape": fit.quality.holdout_wape,
        "own_price_estimate": fit.own_price.estimate,
        "job_id": job_id,
        "window_start": _date(fit.window.first_period),
        "window_end": _date(fit.window.last_period),
        "created_at": utcnow(),
    }


def encode_result(fit: DemandFit) -> str:
    """A fit's record as the text of its ``result`` column (the costly part of a record),
    as the ORM would write it (the engine encodes JSON columns with the same function)."""
    return json_text.dumps(fit.to_dict())


@functools.lru_cache(maxsize=64)
def _spec_json(spec: ModelSpec) -> str:
    """A spec's JSON text: every record of a batch shares its spec, so it is encoded once."""
    return json_text.dumps(spec.to_dict())


# The columns of row_values, in the order insert_rows writes them.
_COLUMNS = tuple(c.name for c in FitRow.__table__.columns if c.name != "id")
_JSON_COLUMNS = frozenset({"spec", "result", "gates"})
# Fit records as SQLite takes them: the JSON columns arrive as text already encoded (as
# the JSON type would encode them), the other columns keep their types.
_TEXT_JSON_FITS = table(
    "fits",
    *(
        column(c.name, Text() if c.name in _JSON_COLUMNS else c.type)
        for c in FitRow.__table__.columns
        if c.name != "id"
    ),
)


def insert_rows(session: Session, rows: Sequence[dict[str, Any]]) -> None:
    """Insert new fit records (``row_values(..., encoded=True)``) in bulk.

    PostgreSQL takes them with one COPY in the session's transaction (an INSERT per
    record costs a round trip and a statement each); SQLite with one executemany.
    """
    if not rows:
        return
    conn = session.connection()
    if conn.dialect.name != "postgresql":
        conn.execute(insert(_TEXT_JSON_FITS), list(rows))
        return
    driver: Any = conn.connection.driver_connection
    with driver.cursor() as cursor, cursor.copy(
        f"COPY fits ({', '.join(_COLUMNS)}) FROM STDIN"
    ) as copy:
        for row in rows:
            copy.write_row([row[name] for name in _COLUMNS])


def _date(text: str | None) -> dt.date | None:
    return dt.date.fromisoformat(text) if text else None


def fit_now(
    session: Session, *, sku: str, spec: dict[str, Any] | None, settings: Settings
) -> FitRow:
    """Fit one product with the given spec (or its default) and record the result."""
    product = products.get_or_raise(session, sku=sku)
    model_spec = parse_spec(spec if spec is not None else product.default_spec)
    history = histories.load_history(session, product=product, cross_skus=model_spec.cross_prices)
    try:
        with strict_floats():
            fit = fit_demand(history, model_spec)
            if model_spec.pooling == "family" and product.family:
                fit = pool_with_family(session, product=product, fit=fit, spec=model_spec)
    except InsufficientDataError as exc:
        raise InvalidInput(
            f"not enough data to fit {sku!r}: {exc.n_obs} usable observations, the model "
            f"needs at least {exc.n_required} ({exc.n_missing} more)",
            errors=[ErrorItem(field="observations", message=str(exc))],
        ) from None
    except UnusableDataError as exc:
        raise InvalidInput(
            f"the data of {sku!r} cannot support this model: {exc}",
            errors=[ErrorItem(field="spec", message=str(exc))],
        ) from None
    except NUMERIC_FAILURES as exc:
        raise unusable(
            f"the history of {sku!r} cannot be fitted in the {model_spec.form} form",
            exc,
            field="spec",
        ) from None
    row = record_fit(session, product=product, fit=fit, settings=settings)
    metrics.record_fit("activated" if row.status == ACTIVE else "rejected")
    return row


def pool_with_family(
    session: Session, *, product: ProductRow, fit: DemandFit, spec: ModelSpec
) -> DemandFit:
    """Shrink the fit's own-price elasticity toward its family's.

    Siblings contribute their active fits; a sibling without one is fitted for the
    occasion with the same spec minus cross-price terms (those fits are not stored).
    """
    siblings = list(
        session.scalars(
            select(ProductRow).where(
                ProductRow.family == product.family, ProductRow.id != product.id
            )
        )
    )
    members: list[DemandFit] = [fit]
    to_fit = []
    for sibling in siblings:
        active = active_row(session, product_id=sibling.id)
        if active is not None:
            members.append(restore(active))
        else:
            to_fit.append(histories.load_history(session, product=sibling))
    if to_fit:
        plain = ModelSpec.from_dict({**spec.to_dict(), "cross_prices": [], "pooling": "none"})
        members += [f for f in fit_many(to_fit, plain) if isinstance(f, DemandFit)]
    family = product.family or ""
    pooled = pool_family(members, families={m.sku: family for m in members})
    return pooled[0]
