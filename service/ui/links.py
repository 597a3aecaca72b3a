"""Where pages point: the live service under /ui, or the files of a static report."""

from __future__ import annotations

import hashlib
import re
from typing import Protocol
from urllib.parse import quote, urlencode

UI_PREFIX = "/ui"
STATIC_URL = f"{UI_PREFIX}/static"


class Links(Protocol):
    live: bool

    def catalogue(
        self,
        *,
        family: str | None = None,
        sort: str | None = None,
        descending: bool = False,
        page: int = 1,
    ) -> str: ...

    def product(self, sku: str) -> str: ...

    def chart(self, sku: str, kind: str) -> str: ...

    def asset(self, name: str) -> str: ...


class LiveLinks:
    """Links of the pages the service serves."""

    live = True

    def catalogue(
        self,
        *,
        family: str | None = None,
        sort: str | None = None,
        descending: bool = False,
        page: int = 1,
    ) -> str:
        query: dict[str, str] = {}
        if family:
            query["family"] = family
        if sort and sort != "sku":
            query["sort"] = sort
        if descending:
            query["order"] = "desc"
        if page > 1:
            query["page"] = str(page)
        return f"{UI_PREFIX}/" + (f"?{urlencode(query)}" if query else "")

    def product(self, sku: str) -> str:
        return f"{UI_PREFIX}/products/{quote(sku)}"

    def chart(self, sku: str, kind: str) -> str:
        return f"{UI_PREFIX}/products/{quote(sku)}/charts/{kind}.svg"

    def asset(self, name: str) -> str:
        return f"{STATIC_URL}/{name}"


def family_slug(family: str) -> str:
    """A file-name-safe form of a family name, unique even when characters were replaced."""
    slug = re.sub(r"[^A-Za-z0-9_-]+", "-", family).strip("-") or "family"
    if slug != family:
        slug += "-" + hashlib.sha256(family.encode()).hexdigest()[:6]
    return slug


class StaticLinks:
    """Relative links between the files of a static report (all pages in one folder).

    Sorting there is done in the browser, so sort links all lead to the same page.
    """

    live = False

    def catalogue(
        self,
        *,
        family: str | None = None,
        sort: str | None = None,
        descending: bool = False,
        page: int = 1,
    ) -> str:
        return f"family-{family_slug(family)}.html" if family else "index.html"

    def product(self, sku: str) -> str:
        return f"product-{sku}.html"

    def chart(self, sku: str, kind: str) -> str:
        return f"charts/{sku}-{kind}.svg"

    def asset(self, name: str) -> str:
        return f"static/{name}"
