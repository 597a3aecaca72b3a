"""Products: create or replace, read, change, delete, list."""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Query, Response, status

from service.catalogue import products
from service.catalogue.deps import ReadProduct, SkuPath
from service.catalogue.schemas import ProductIn, ProductOut, ProductPatch, product_out
from service.core.deps import ADMIN, READ, WRITE, ReadSession, WriteSession
from service.core.pagination import decode_cursor, encode_cursor
from service.core.responses import problems
from service.core.schemas import SKU_PATTERN, Page
from service.core.tables import utcnow
from service.pricing import price_record

router = APIRouter(prefix="/v1/products", tags=["products"])


@router.put(
    "/{sku}",
    response_model=ProductOut,
    dependencies=[WRITE],
    operation_id="put_product",
    summary="Create or replace a product",
    responses={201: {"model": ProductOut, "description": "Created"}, **problems(422)},
    status_code=status.HTTP_200_OK,
)
def put_product(
    sku: SkuPath, body: ProductIn, session: WriteSession, response: Response
) -> ProductOut:
    """Creates the product (201) or replaces every field of an existing one (200)."""
    row, created = products.put(session, sku=sku, fields=body.model_dump())
    if created:
        response.status_code = status.HTTP_201_CREATED
    return product_out(row)


@router.get(
    "/{sku}",
    response_model=ProductOut,
    dependencies=[READ],
    operation_id="get_product",
    summary="Read a product",
    responses=problems(404, 422),
)
def get_product(product: ReadProduct, session: ReadSession) -> ProductOut:
    now = utcnow()
    live = price_record.live_price(session, product.id, now)
    return product_out(product).model_copy(
        update={
            "live_price": None if live is None else live.price,
            "prior_price": price_record.prior_lowest_price(session, product.id, now),
            "price_changed_at": price_record.last_change(session, product.id, now),
        }
    )


@router.patch(
    "/{sku}",
    response_model=ProductOut,
    dependencies=[WRITE],
    operation_id="patch_product",
    summary="Change some fields of a product",
    responses=problems(404, 422),
)
def patch_product(sku: SkuPath, body: ProductPatch, session: WriteSession) -> ProductOut:
    row = products.update(session, sku=sku, changes=body.model_dump(exclude_unset=True))
    return product_out(row)


@router.delete(
    "/{sku}",
    status_code=status.HTTP_204_NO_CONTENT,
    dependencies=[ADMIN],
    operation_id="delete_product",
    summary="Delete a product and its history",
    responses=problems(404, 422),
)
def delete_product(sku: SkuPath, session: WriteSession) -> Response:
    products.delete_one(session, sku=sku)
    return Response(status_code=status.HTTP_204_NO_CONTENT)


@router.get(
    "",
    response_model=Page[ProductOut],
    dependencies=[READ],
    operation_id="list_products",
    summary="List products, optionally one family",
    responses=problems(422),
)
def list_products(
    session: ReadSession,
    family: Annotated[str | None, Query(pattern=SKU_PATTERN)] = None,
    limit: Annotated[int, Query(ge=1, le=500)] = 100,
    cursor: Annotated[
        str | None, Query(description="From `next_cursor` of the previous page")
    ] = None,
) -> Page[ProductOut]:
    position = decode_cursor(cursor)
    after = str(position.get("after")) if position else None
    rows, more = products.list_page(session, family=family, limit=limit, after_sku=after)
    next_cursor = encode_cursor({"after": rows[-1].sku}) if more and rows else None
    return Page[ProductOut](items=[product_out(r) for r in rows], next_cursor=next_cursor)
