"""Rows and domain results to response schemas: the one place that knows both sides."""

from __future__ import annotations

from service.schemas import ApiKeyOut, ObservationOut, ProductOut
from service.tables import ApiKeyRow, ObservationRow, ProductRow


def product_out(row: ProductRow) -> ProductOut:
    return ProductOut(
        sku=row.sku,
        name=row.name,
        family=row.family,
        currency=row.currency,
        unit_cost=row.unit_cost,
        current_price=row.current_price,
        min_price=row.min_price,
        max_price=row.max_price,
        default_spec=row.default_spec,
        created_at=row.created_at,
        updated_at=row.updated_at,
    )


def observation_out(row: ObservationRow) -> ObservationOut:
    return ObservationOut(
        period=row.period,
        price=row.price,
        units=row.units,
        unit_cost=row.unit_cost,
        in_stock=row.in_stock,
        covariates=dict(row.covariates or {}),
    )


def api_key_out(row: ApiKeyRow) -> ApiKeyOut:
    return ApiKeyOut(
        id=row.id,
        name=row.name,
        scopes=list(row.scopes),
        created_at=row.created_at,
        last_used_at=row.last_used_at,
        revoked_at=row.revoked_at,
    )
