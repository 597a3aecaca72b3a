"""Loading the invented tea-shop catalogue (models.scenario) into storage, idempotently."""

from __future__ import annotations

import json
import math
from dataclasses import dataclass

from sqlalchemy.orm import Session

from models import Catalogue, ScenarioProduct, generate_catalogue
from service.catalogue import observations, products
from service.catalogue.ingest import covariates_json
from service.catalogue.observations import ObservationTuple, observation_writer
from service.core.db import make_engine, make_session_factory, session_scope
from service.core.settings import Settings
from service.core.tables import ProductRow


@dataclass(frozen=True)
class DemoSummary:
    products: int
    observations: int
    inserted: int
    updated: int
    unchanged: int = 0


def product_fields(product: ScenarioProduct) -> dict[str, object]:
    return {
        "name": product.name,
        "family": product.family,
        "currency": product.currency,
        "unit_cost": round(product.unit_cost, 2),
        "current_price": round(product.current_price, 2),
        "min_price": round(product.min_price, 2),
        "max_price": round(product.max_price, 2),
        "default_spec": demo_spec(product),
    }


def demo_spec_cross(sku: str, seed: int = 7) -> list[str]:
    """The siblings whose prices enter a demo tin's default spec."""
    return sorted(generate_catalogue(seed).product(sku).truth.cross_price_coefs)


def demo_spec(product: ScenarioProduct) -> dict[str, object]:
    """What an analyst of the shop would start from: every recorded driver, the siblings
    believed to compete with the tin, and form chosen by out-of-sample error."""
    return {
        "form": "auto",
        "covariates": ["rival_price", "promo", "ad_spend", "holiday"],
        "log_covariates": ["rival_price", "ad_spend"],
        "cross_prices": sorted(product.truth.cross_price_coefs),
    }


def observation_rows(product_id: int, product: ScenarioProduct) -> list[ObservationTuple]:
    h = product.history
    rows: list[ObservationTuple] = []
    for i in range(h.n_periods):
        covariates = {
            name: float(values[i])
            for name, values in h.covariates.items()
            if math.isfinite(values[i])
        }
        cost = float(h.unit_cost[i])
        rows.append(
            (
                product_id,
                str(h.periods[i]),
                float(h.price[i]),
                float(h.units[i]),
                cost if math.isfinite(cost) else None,
                bool(h.in_stock[i]),
                covariates_json(covariates),
            )
        )
    return rows


def _same_product(row: ProductRow | None, fields: dict[str, object]) -> bool:
    return row is not None and all(getattr(row, name) == value for name, value in fields.items())


def _same_history(session: Session, product_id: int, rows: list[ObservationTuple]) -> bool:
    """Whether the stored history is exactly the generated one (the demo loaded before)."""
    stored = observations.list_all(session, product_id=product_id)
    if len(stored) != len(rows):
        return False
    return all(
        (
            s.period.isoformat(),
            s.price,
            s.units,
            s.unit_cost,
            s.in_stock,
            dict(s.covariates or {}),
        )
        == (period, price, units, cost, in_stock, json.loads(covariates or "{}"))
        for s, (_, period, price, units, cost, in_stock, covariates) in zip(
            stored, rows, strict=True
        )
    )


def load_catalogue(settings: Settings, catalogue: Catalogue) -> DemoSummary:
    """Upsert every product and its history in one transaction. A product and a history
    that are already stored as generated are left alone, so loading again changes
    nothing (no history is marked as changed, so no refit is due)."""
    engine = make_engine(settings)
    try:
        with session_scope(make_session_factory(engine, writer=True)) as session:
            writer = observation_writer(session)
            unchanged = 0
            for product in catalogue.products:
                fields = product_fields(product)
                row = products.get(session, sku=product.sku)
                if not _same_product(row, fields):
                    row, _ = products.put(session, sku=product.sku, fields=fields)
                assert row is not None
                rows = observation_rows(row.id, product)
                if _same_history(session, row.id, rows):
                    unchanged += len(rows)
                    continue
                writer.write(rows)
            inserted, updated = writer.finish()
    finally:
        engine.dispose()
    return DemoSummary(
        products=len(catalogue.products),
        observations=writer.rows + unchanged,
        inserted=inserted,
        updated=updated,
        unchanged=unchanged,
    )


def load(settings: Settings, *, seed: int = 7) -> DemoSummary:
    return load_catalogue(settings, generate_catalogue(seed))
