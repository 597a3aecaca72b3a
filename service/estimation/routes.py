"""Demand estimation: fit now, fit versions, the active model, elasticities, prediction."""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Path, Query, Request, status

from service.catalogue import products
from service.catalogue.deps import ReadProduct, SkuPath
from service.core.audit_trail import WRITTEN, mark
from service.core.deps import APPROVE, READ, WRITE, ReadSession, SettingsDep, WriteSession
from service.core.pagination import MAX_ID, cursor_int, decode_cursor, encode_cursor
from service.core.responses import problems
from service.core.schemas import Page
from service.estimation import answers, fit_review, fits, shrinkage
from service.estimation.schemas import (
    ActivateFitRequest,
    ElasticitiesOut,
    FitOut,
    FitRequest,
    FitSummary,
    PredictionOut,
    PredictRequest,
    fit_out,
    fit_summary,
    shrunk_out,
)
from service.pricing.money import money_text

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
    product: ReadProduct,
    session: ReadSession,
    limit: Annotated[int, Query(ge=1, le=200)] = 50,
    cursor: Annotated[
        str | None, Query(description="From `next_cursor` of the previous page")
    ] = None,
) -> Page[FitSummary]:
    position = decode_cursor(cursor)
    before = cursor_int(position, "before")
    rows, more = fits.list_page(session, product_id=product.id, limit=limit, before_version=before)
    next_cursor = encode_cursor({"before": rows[-1].version}) if more and rows else None
    return Page[FitSummary](
        items=[fit_summary(r, product.sku) for r in rows], next_cursor=next_cursor
    )


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
    return fit_out(fits.get_or_raise(session, sku=sku, fit_id=fit_id), sku)


@router.post(
    "/fits/{fit_id}/activate",
    response_model=FitOut,
    dependencies=[APPROVE],
    operation_id="activate_fit",
    summary="Make a fit version the active fit, by a person's decision",
    responses=problems(404, 409, 422),
)
def activate_fit(
    sku: SkuPath,
    fit_id: Annotated[int, Path(ge=1, le=MAX_ID)],
    request: Request,
    session: WriteSession,
    body: ActivateFitRequest | None = None,
) -> FitOut:
    """A key with the `approve` scope makes a stored fit version the product's active fit:
    one the quality gates left to a person (`awaiting_review`), a `rejected` one (a
    `reason` is then required), or an earlier, `superseded` one (a restore). The fit it
    replaces becomes `superseded`; pricing uses the activated fit from then on. The
    decision (who, when, why) is kept with the fit's gates and in the audit log. 409 if
    the fit is already active."""
    product = products.get_or_raise(session, sku=sku)
    done = fit_review.activate_version(
        session,
        product=product,
        fit_id=fit_id,
        reason=body.reason if body else None,
        key_id=getattr(request.state, "key_id", None),
    )
    mark(request, WRITTEN)  # the activation wrote its own, fuller audit entry
    return fit_out(done.fit, sku)


@router.get(
    "/demand-model",
    response_model=FitOut,
    dependencies=[READ],
    operation_id="get_demand_model",
    summary="The active fit: equation, coefficients, quality, diagnostics, warnings",
    responses=problems(404, 422),
)
def get_demand_model(product: ReadProduct, session: ReadSession) -> FitOut:
    return fit_out(fits.active_or_raise(session, product=product), product.sku)


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
    product: ReadProduct,
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
    found = shrinkage.shrunk_active_fit(session, product=product)
    answer = answers.elasticities_at(
        found.own,
        at=at,
        income_like=tuple(income_like or ()),
        money=money_text(product.currency),
    )
    body = answer.report.to_dict()
    return ElasticitiesOut(
        sku=product.sku,
        fit_id=found.fit_id,
        form=body["form"],
        at=body["at"],
        point=body["point"],
        level=body["level"],
        elasticities=body["rows"],
        pooled=body["pooled"],
        shrunk=shrunk_out(found, shrinkage.own_row_at(found, at=at)),
        warnings=answer.warnings,
    )


@router.post(
    "/predict",
    response_model=PredictionOut,
    dependencies=[READ],
    operation_id="predict",
    summary="Expected units at given prices and covariates, with a prediction interval",
    responses=problems(404, 422),
)
def predict(product: ReadProduct, body: PredictRequest, session: ReadSession) -> PredictionOut:
    fit_id, fit = fits.active_fit(session, product)
    answer = answers.prediction(
        fit,
        price=body.price,
        covariates=body.covariates,
        cross_prices=body.cross_prices,
        unit_cost=body.unit_cost if body.unit_cost is not None else product.unit_cost,
        level=body.level,
        money=money_text(product.currency),
    )
    return PredictionOut(**answer.report.to_dict(), fit_id=fit_id, warnings=answer.warnings)
