"""Rows and domain results to response schemas: the one place that knows both sides."""

from __future__ import annotations

import datetime as dt
from typing import Any

from service.schemas import (
    ApiKeyOut,
    FitOut,
    FitSummary,
    JobCounts,
    JobError,
    JobIn,
    JobOut,
    JobProgress,
    ObservationOut,
    ProductOut,
    ScheduleOut,
)
from service.tables import (
    ApiKeyRow,
    FitRow,
    JobRow,
    ObservationRow,
    ProductRow,
    ScheduleRow,
    ScheduleRunRow,
    as_utc,
)


def _utc_or_none(value: dt.datetime | None) -> dt.datetime | None:
    return None if value is None else as_utc(value)


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
        created_at=as_utc(row.created_at),
        updated_at=as_utc(row.updated_at),
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
        created_at=as_utc(row.created_at),
        last_used_at=_utc_or_none(row.last_used_at),
        revoked_at=_utc_or_none(row.revoked_at),
    )


def fit_summary(row: FitRow, sku: str) -> FitSummary:
    return FitSummary(
        id=row.id,
        sku=sku,
        version=row.version,
        status=row.status,
        form=row.form,
        n_obs=row.n_obs,
        own_price_estimate=row.own_price_estimate,
        holdout_wape=row.holdout_wape,
        created_at=as_utc(row.created_at),
    )


def fit_out(row: FitRow, sku: str) -> FitOut:
    result = row.result
    return FitOut(
        **fit_summary(row, sku).model_dump(),
        spec=row.spec,
        equation=result["equation"],
        coefficients=result["coefficients"],
        quality=result["quality"],
        diagnostics=result["diagnostics"],
        warnings=result["warnings"],
        gates=row.gates or {"passed": False, "checks": []},
        window=result["window"],
        price_range=list(result["price_range"]),
        candidate_scores=result.get("candidate_scores") or {},
        pooled=result.get("pooled"),
    )


def job_out(row: JobRow) -> JobOut:
    scope: Any = "all" if row.scope == {"all": True} else row.scope
    return JobOut(
        id=row.id,
        kind=row.kind,
        scope=scope,
        force=bool((row.options or {}).get("force")),
        status=row.status,
        progress=JobProgress(done=row.done, total=row.total),
        counts=JobCounts(**(row.counts or {})),
        errors=[JobError(**e) for e in (row.errors or [])],
        message=row.message,
        schedule=row.schedule_name,
        created_at=as_utc(row.created_at),
        started_at=_utc_or_none(row.started_at),
        finished_at=_utc_or_none(row.finished_at),
    )


def schedule_out(
    row: ScheduleRow, last: ScheduleRunRow | None, next_run: dt.datetime | None
) -> ScheduleOut:
    return ScheduleOut(
        name=row.name,
        cron=row.cron,
        timezone=row.timezone,
        job=JobIn.model_validate(row.job),
        enabled=row.enabled,
        next_run_at=next_run,
        last_run_at=_utc_or_none(last.slot) if last else None,
        last_job_id=last.job_id if last else None,
        created_at=as_utc(row.created_at),
        updated_at=as_utc(row.updated_at),
    )
