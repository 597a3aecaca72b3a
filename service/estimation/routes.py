"""Demand estimation: fit now, fit versions, the active model, elasticities, prediction."""

from __future__ import annotations

import math
from typing import Annotated

from fastapi import APIRouter, Path, Query, status

import models
from models.guards import price_range_warning
from service.catalogue import products
from service.catalogue.product_routes import SkuPath
from service.core.deps import READ, WRITE, ReadSession, SettingsDep, WriteSession
from service.core.errors import NUMERIC_FAILURES, ErrorItem, InvalidInput, strict_floats, unusable
from service.core.pagination import MAX_ID, cursor_int, decode_cursor, encode_cursor
from service.core.responses import problems
from service.core.schemas import Page
from service.estimation import fits
from service.estimation.schemas import (
    ElasticitiesOut,
    FitOut,
    FitRequest,
    FitSummary,
    PredictionOut,
    PredictRequest,
    fit_out,
    fit_summary,
)

router = APIRouter(prefix="/v1/products/{sku}", tags=["demand models"])

AT_PATTERN = r"^(mean|latest|[A-Za-z0-9_.-]+:-?[0-9.eE+-]+(,[A-Za-z0-9_.-]+:-?[0-9.eE+-]+)*)$"


@router.post(
    "/fits",
    response_model=FitOut,
    status_code=status.HTTP_201_CREATED,
    dependencies=[WRITE],
    operation_id="create_fit",
    summary="Fit the product's demand model now",
    responses=problems(404, 409, 422),
)
def create_fit(
    sku: SkuPath, session: WriteSession, settings: SettingsDep, body: FitRequest | None = None
) -> FitOut:
    """Fits with the given spec (or the product's default) and stores a new version. It
    becomes the active fit only if it passes the quality gates; otherwise it is stored as
    `rejected` with the reasons and the previous active fit stays active."""
    row = fits.fit_product(session, sku=sku, spec=body.spec if body else None, settings=settings)
    return fit_out(row, sku)


@router.get(
    "/fits",
    response_model=Page[FitSummary],
    dependencies=[READ],
    operation_id="list_fits",
    summary="List a product's fit versions, newest first",
    responses=problems(404, 422),
)
def list_fits(
    sku: SkuPath,
    session: ReadSession,
    limit: Annotated[int, Query(ge=1, le=200)] = 50,
    cursor: Annotated[
        str | None, Query(description="From `next_cursor` of the previous page")
    ] = None,
) -> Page[FitSummary]:
    product = products.get_or_raise(session, sku=sku)
    position = decode_cursor(cursor)
    before = cursor_int(position, "before")
    rows, more = fits.list_page(session, product_id=product.id, limit=limit, before_version=before)
    next_cursor = encode_cursor({"before": rows[-1].version}) if more and rows else None
    return Page[FitSummary](items=[fit_summary(r, sku) for r in rows], next_cursor=next_cursor)


@router.get(
    "/fits/{fit_id}",
    response_model=FitOut,
    dependencies=[READ],
    operation_id="get_fit",
    summary="Read one fit version",
    responses=problems(404, 422),
)
def get_fit(
    sku: SkuPath, fit_id: Annotated[int, Path(ge=1, le=MAX_ID)], session: ReadSession
) -> FitOut:
    product = products.get_or_raise(session, sku=sku)
    return fit_out(fits.get_or_raise(session, product=product, fit_id=fit_id), sku)


@router.get(
    "/demand-model",
    response_model=FitOut,
    dependencies=[READ],
    operation_id="get_demand_model",
    summary="The active fit: equation, coefficients, quality, diagnostics, warnings",
    responses=problems(404, 422),
)
def get_demand_model(sku: SkuPath, session: ReadSession) -> FitOut:
    product = products.get_or_raise(session, sku=sku)
    return fit_out(fits.active_or_raise(session, product=product), sku)


def _parse_at(at: str) -> str | dict[str, float]:
    if at in ("mean", "latest"):
        return at
    values: dict[str, float] = {}
    for part in at.split(","):
        name, _, number = part.partition(":")
        try:
            values[name] = float(number)
        except ValueError:
            raise InvalidInput(
                "`at` has a value that is not a number",
                errors=[ErrorItem(field="at", message=f"{part!r} is not name:number")],
            ) from None
        if not math.isfinite(values[name]):
            raise InvalidInput(
                "`at` has a value that is not a finite number",
                errors=[ErrorItem(field="at", message=f"{part!r} overflows double precision")],
            )
    return values


@router.get(
    "/elasticities",
    response_model=ElasticitiesOut,
    response_model_by_alias=True,
    dependencies=[READ],
    operation_id="get_elasticities",
    summary="Own-price, cross-price and covariate elasticities with 95% intervals",
    responses=problems(404, 422),
)
def get_elasticities(
    sku: SkuPath,
    session: ReadSession,
    at: Annotated[
        str,
        Query(
            pattern=AT_PATTERN,
            description="`mean` (the fitted periods' means), `latest` (the last fitted period), or "
            "given values as `name:value` pairs separated by commas, e.g. `price:6.5,promo:1` "
            "(variables not named stay at their means)",
        ),
    ] = "mean",
    income_like: Annotated[
        list[str] | None,
        Query(description="Covariates to classify as inferior / necessity / luxury"),
    ] = None,
) -> ElasticitiesOut:
    product = products.get_or_raise(session, sku=sku)
    fit_id, fit = fits.active_fit(session, product)
    point = _parse_at(at)
    known = set(fit.variable_means)
    unknown = sorted(set(point) - known) if isinstance(point, dict) else []
    unknown += sorted(set(income_like or ()) - known)
    if unknown:
        raise InvalidInput(
            "unknown variables for this fit",
            errors=[
                ErrorItem(
                    field="at",
                    message=f"{name!r} is not a variable of the fit; known: "
                    f"{', '.join(sorted(known))}",
                )
                for name in unknown
            ],
        )
    try:
        with strict_floats():
            report = models.elasticities(fit, at=point, income_like=tuple(income_like or ()))
    except ValueError as exc:  # a log term met a non-positive value
        raise InvalidInput(
            "elasticities cannot be evaluated at these values",
            errors=[ErrorItem(field="at", message=str(exc))],
        ) from None
    except NUMERIC_FAILURES as exc:
        raise unusable("no elasticities at these values", exc, field="at") from None
    body = report.to_dict()
    warnings = []
    price = report.point.get("price")
    if price is not None and (w := price_range_warning(fit, price)) is not None:
        warnings.append({"code": w.code, "message": w.message})
    return ElasticitiesOut(
        sku=sku,
        fit_id=fit_id,
        form=body["form"],
        at=body["at"],
        point=body["point"],
        level=body["level"],
        elasticities=body["rows"],
        pooled=body["pooled"],
        warnings=warnings,
    )


@router.post(
    "/predict",
    response_model=PredictionOut,
    dependencies=[READ],
    operation_id="predict",
    summary="Expected units at given prices and covariates, with a prediction interval",
    responses=problems(404, 422),
)
def predict(sku: SkuPath, body: PredictRequest, session: ReadSession) -> PredictionOut:
    product = products.get_or_raise(session, sku=sku)
    fit_id, fit = fits.active_fit(session, product)
    unknown = [f"covariates.{n}" for n in body.covariates if n not in fit.variable_means]
    unknown += [f"cross_prices.{s}" for s in body.cross_prices if s not in fit.variable_means]
    if unknown:
        raise InvalidInput(
            "unknown variables for this fit",
            errors=[
                ErrorItem(field=name, message="not a variable of the active fit")
                for name in unknown
            ],
        )
    unit_cost = body.unit_cost if body.unit_cost is not None else product.unit_cost
    try:
        with strict_floats():
            result = models.predict(
                fit,
                price=body.price,
                covariates=body.covariates,
                cross_prices=body.cross_prices,
                unit_cost=unit_cost,
                level=body.level,
            )
    except ValueError as exc:  # a log term met a non-positive value
        raise InvalidInput(
            "these values cannot enter the model",
            errors=[ErrorItem(field="body", message=str(exc))],
        ) from None
    except NUMERIC_FAILURES as exc:
        raise unusable("no prediction at these values", exc) from None
    warnings = []
    if (w := price_range_warning(fit, body.price)) is not None:
        warnings.append({"code": w.code, "message": w.message})
    return PredictionOut(**result.to_dict(), fit_id=fit_id, warnings=warnings)
