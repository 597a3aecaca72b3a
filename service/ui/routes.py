"""HTTP routes of the analyst view: chart SVGs under /v1, pages and sign-in under /ui."""

from __future__ import annotations

import datetime as dt
from typing import Annotated, Literal
from urllib.parse import parse_qs, urlencode, urlsplit

from fastapi import APIRouter, Header, Path, Query, Request, Response
from fastapi.responses import HTMLResponse, RedirectResponse
from sqlalchemy.orm import Session, sessionmaker
from starlette.concurrency import run_in_threadpool
from starlette.staticfiles import StaticFiles

from service.access import view_session as session
from service.access.view_session import COOKIE_NAME, Viewer
from service.catalogue.deps import SkuPath
from service.core.db import session_scope
from service.core.deps import READ, ReadSession
from service.core.errors import NotFound
from service.core.responses import problems
from service.core.settings import Settings
from service.ui import chartbook, pages, records
from service.ui.cache import ChartKey
from service.ui.links import UI_PREFIX, LiveLinks
from service.ui.templating import STATIC_DIR, render

ChartKind = Literal["demand", "money", "fit-over-time"]
SVG = "image/svg+xml"
CHART_CACHE_CONTROL = "private, no-cache"  # keep, but ask again (a 304 is cheap)
PAGE_HEADERS = {
    "Cache-Control": "no-store",
    "Content-Security-Policy": "default-src 'none'; img-src 'self'; style-src 'self'; "
    "script-src 'self'; form-action 'self'; frame-ancestors 'none'; base-uri 'none'",
    "X-Content-Type-Options": "nosniff",
    "Referrer-Policy": "same-origin",
    "X-Frame-Options": "DENY",
}
# A chart opened on its own is a document: nothing in it may run or load.
SVG_HEADERS = {
    "Content-Security-Policy": "default-src 'none'; style-src 'unsafe-inline'",
    "X-Content-Type-Options": "nosniff",
}
LINKS = LiveLinks()

api = APIRouter(prefix="/v1/products/{sku}/charts", tags=["charts"])
ui = APIRouter(prefix=UI_PREFIX, include_in_schema=False)


# -- charts over the API ---------------------------------------------------------------------


def _matches(if_none_match: str | None, etag: str) -> bool:
    if not if_none_match:
        return False
    tags = [t.strip().removeprefix("W/") for t in if_none_match.split(",")]
    return "*" in tags or etag in tags


def chart_response(
    db: Session, product: records.ProductInfo, kind: str, if_none_match: str | None
) -> Response:
    key: ChartKey = chartbook.chart_key(db, product, kind)
    headers = {"ETag": key.etag, "Cache-Control": CHART_CACHE_CONTROL}
    if _matches(if_none_match, key.etag):
        return Response(status_code=304, headers=headers)
    svg = chartbook.cached_svg(db, product, key)
    return Response(content=svg, media_type=SVG, headers={**headers, **SVG_HEADERS})


@api.get(
    "/{kind}.svg",
    dependencies=[READ],
    operation_id="get_chart",
    summary="A chart of the product as SVG: demand, money (revenue and profit) or fit over time",
    response_class=Response,
    responses={
        200: {
            "content": {SVG: {}},
            "description": "The chart, with its title and a text "
            "summary of its numbers inside (`<title>`, `<desc>`)",
        },
        304: {"description": "The chart has not changed since the ETag sent in If-None-Match"},
        **problems(404, 422),
    },
)
def get_chart(
    sku: SkuPath,
    kind: Annotated[ChartKind, Path(description="Which chart")],
    db: ReadSession,
    if_none_match: Annotated[str | None, Header(include_in_schema=False)] = None,
) -> Response:
    """`demand`: past weeks (promotion and stockout weeks marked) with the fitted curve and
    its 95% band at the latest scenario, the observed price range, current and recommended
    price. `money`: revenue and profit against price with the allowed band, the best price
    and its uncertainty range, under the constraints of the latest recommendation. `fit-over-time`:
    actual and fitted units by week, the hold-out weeks shaded, residuals below. Products
    without a fit get a chart that says so. Cacheable: send the ETag back in If-None-Match."""
    return chart_response(db, records.product(db, sku), kind, if_none_match)


# -- pages -----------------------------------------------------------------------------------


def _settings(request: Request) -> Settings:
    settings: Settings = request.app.state.settings
    return settings


def signed_in(request: Request, db: Session) -> Viewer | None:
    settings = _settings(request)
    cookie = session.from_cookie(settings, request.cookies.get(COOKIE_NAME))
    viewer = session.viewer_for(db, cookie)
    if viewer is not None:
        request.state.key_id = viewer.key_id  # for the access log (the id, never the key)
    return viewer


def _safe_next(value: str | None) -> str:
    """Only paths of these pages: never another site, never a scheme."""
    if (
        not value
        or not value.startswith(UI_PREFIX + "/")
        or value.startswith("//")
        or "\\" in value
        or ".." in value
        or value.startswith(f"{UI_PREFIX}/sign-")
    ):
        return f"{UI_PREFIX}/"
    return value


def _to_sign_in(request: Request) -> RedirectResponse:
    """Back to the sign-in form, which returns here afterwards."""
    target = request.url.path + (f"?{request.url.query}" if request.url.query else "")
    query = "" if target in (UI_PREFIX, f"{UI_PREFIX}/") else "?" + urlencode({"next": target})
    response = RedirectResponse(f"{UI_PREFIX}/sign-in{query}", 303)
    response.headers.update(PAGE_HEADERS)
    if request.cookies.get(COOKIE_NAME):
        response.delete_cookie(COOKIE_NAME, path=UI_PREFIX)
    return response


def page(html: str, status_code: int = 200) -> HTMLResponse:
    return HTMLResponse(html, status_code=status_code, headers=PAGE_HEADERS)


def _common(viewer: Viewer | None) -> dict[str, object]:
    return {"links": LINKS, "viewer": viewer, "generated": dt.datetime.now(dt.UTC)}


def _missing(viewer: Viewer, detail: str) -> HTMLResponse:
    return page(render("missing.html", detail=detail, **_common(viewer)), 404)


@ui.get("", response_class=HTMLResponse)
@ui.get("/", response_class=HTMLResponse)
def catalogue_page(
    request: Request,
    db: ReadSession,
    family: Annotated[str | None, Query(max_length=64)] = None,
    sort: Annotated[str, Query(max_length=32)] = "sku",
    order: Annotated[Literal["asc", "desc"], Query()] = "asc",
    page_number: Annotated[int, Query(alias="page", ge=1, le=100_000)] = 1,
) -> Response:
    viewer = signed_in(request, db)
    if viewer is None:
        return _to_sign_in(request)
    view = pages.catalogue(
        db, family=family or None, sort=sort, descending=order == "desc", page=page_number
    )
    return page(render("catalogue.html", view=view, **_common(viewer)))


@ui.get("/products/{sku}", response_class=HTMLResponse)
def product_page(request: Request, sku: SkuPath, db: ReadSession) -> Response:
    viewer = signed_in(request, db)
    if viewer is None:
        return _to_sign_in(request)
    try:
        view = pages.product_page(db, sku)
    except NotFound:
        return _missing(viewer, f"There is no product with sku {sku}.")
    return page(render("product.html", page=view, **_common(viewer)))


@ui.get("/products/{sku}/charts/{kind}.svg")
def chart_page(
    request: Request,
    sku: SkuPath,
    kind: ChartKind,
    db: ReadSession,
    if_none_match: Annotated[str | None, Header()] = None,
) -> Response:
    if signed_in(request, db) is None:
        return Response(status_code=401, headers={"Cache-Control": "no-store"})
    try:
        product = records.product(db, sku)
    except NotFound:
        return Response(status_code=404)
    return chart_response(db, product, kind, if_none_match)


# -- signing in and out ----------------------------------------------------------------------

_MESSAGES = {
    "signed_out": ("You are signed out.", "info"),
    "expired": ("Please sign in to continue.", "info"),
}


def _sign_in_page(
    request: Request, *, next_path: str, message: str = "", kind: str = "info", status: int = 200
) -> HTMLResponse:
    hours = round(_settings(request).session_max_age_seconds / 3600, 1)
    html = render(
        "sign_in.html",
        next=next_path,
        message=message,
        message_kind=kind,
        hours=f"{hours:g}",
        **_common(None),
    )
    return page(html, status)


@ui.get("/sign-in", response_class=HTMLResponse)
def sign_in_form(request: Request, next: str | None = None) -> HTMLResponse:  # noqa: A002
    # A key passed in the address is never used: addresses end up in logs and histories.
    message, kind = next_message(request)
    return _sign_in_page(request, next_path=_safe_next(next), message=message, kind=kind)


def next_message(request: Request) -> tuple[str, str]:
    for flag, (text, kind) in _MESSAGES.items():
        if flag in request.query_params:
            return text, kind
    return "", "info"


def _same_origin(request: Request) -> bool:
    """A form post from these pages: its Origin is this site's, or, when a browser sends
    no Origin, its Referer is (neither header at all: a script, let through)."""
    here = f"{request.url.scheme}://{request.url.netloc}"
    origin = request.headers.get("origin")
    if origin is not None:
        return origin == here  # "null" (a sandboxed or opaque origin) is never here
    referer = request.headers.get("referer")
    if referer is None:
        return True
    parts = urlsplit(referer)
    return f"{parts.scheme}://{parts.netloc}" == here


def _secure(request: Request) -> bool:
    choice = _settings(request).session_cookie_secure
    return choice == "always" or (choice == "auto" and request.url.scheme == "https")


def _check(request: Request, key: str) -> tuple[Viewer | None, str]:
    factory: sessionmaker[Session] = request.app.state.read_sessions
    with session_scope(factory) as db:
        return session.check_key(db, key)


@ui.post("/sign-in", response_class=HTMLResponse)
async def sign_in(request: Request) -> Response:
    try:
        form = parse_qs((await request.body()).decode("utf-8", "replace"), max_num_fields=10)
    except ValueError:  # more fields than the form has
        form = {}
    next_path = _safe_next((form.get("next") or [""])[0])
    if not _same_origin(request):
        return _sign_in_page(
            request,
            next_path=next_path,
            message="Sign in from this site's own page.",
            kind="error",
            status=403,
        )
    key = (form.get("key") or [""])[0]
    viewer, reason = await run_in_threadpool(_check, request, key) if key else (None, "")
    if viewer is None:
        return _sign_in_page(
            request,
            next_path=next_path,
            message=reason or "Enter a key.",
            kind="error",
            status=401,
        )
    request.state.key_id = viewer.key_id
    settings = _settings(request)
    response = RedirectResponse(next_path, status_code=303, headers=PAGE_HEADERS)
    response.set_cookie(
        COOKIE_NAME,
        session.sign(settings, viewer),
        max_age=settings.session_max_age_seconds,
        path=UI_PREFIX,
        httponly=True,
        samesite="strict",
        secure=_secure(request),
    )
    return response


@ui.post("/sign-out")
def sign_out(request: Request) -> RedirectResponse:
    cookie = session.from_cookie(_settings(request), request.cookies.get(COOKIE_NAME))
    if cookie is not None:
        request.state.key_id = cookie.key_id
        factory: sessionmaker[Session] = request.app.state.write_sessions
        with session_scope(factory) as db:
            session.end_sessions(db, cookie)
    response = RedirectResponse(
        f"{UI_PREFIX}/sign-in?signed_out", status_code=303, headers=PAGE_HEADERS
    )
    response.delete_cookie(
        COOKIE_NAME, path=UI_PREFIX, httponly=True, samesite="strict", secure=_secure(request)
    )
    return response


router = APIRouter()
router.include_router(api)
router.include_router(ui)


def static_files() -> StaticFiles:
    """The pages' stylesheet and script, served at :data:`STATIC_URL`."""
    return StaticFiles(directory=STATIC_DIR)
