"""Typed dependencies of routes under a product's path: the product, or a 404."""

from __future__ import annotations

from typing import Annotated

from fastapi import Depends, Path

from service.catalogue import products
from service.core.deps import ReadSession, WriteSession
from service.core.schemas import SKU_PATTERN
from service.core.tables import ProductRow

SkuPath = Annotated[str, Path(pattern=SKU_PATTERN, description="The product's sku")]


def _read_product(sku: SkuPath, session: ReadSession) -> ProductRow:
    # The same session as the route's own ReadSession (FastAPI caches it per request).
    return products.get_or_raise(session, sku=sku)


def _write_product(sku: SkuPath, session: WriteSession) -> ProductRow:
    return products.get_or_raise(session, sku=sku)


ReadProduct = Annotated[ProductRow, Depends(_read_product)]
"""The product named by the path, read in the request's read session."""
WriteProduct = Annotated[ProductRow, Depends(_write_product)]
"""The product named by the path, read in the request's write transaction."""
