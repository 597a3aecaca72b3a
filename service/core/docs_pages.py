"""The interactive API documentation (``/docs``), served with no network.

FastAPI's own pages load their script and styles from a public CDN, so they stay blank
on a machine without internet. The same assets ship inside the `fastapi-offline`
package (MIT); they are served from the package at :data:`ASSETS_URL`. There is no
``/redoc`` page: its script fetches a logo from the network.
"""

from __future__ import annotations

from importlib.resources import files

from fastapi import FastAPI
from fastapi.openapi.docs import get_swagger_ui_html
from fastapi.responses import HTMLResponse
from starlette.staticfiles import StaticFiles

ASSETS_URL = "/docs-assets"


def install(app: FastAPI) -> None:
    """Serve ``/docs`` from the packaged assets (create the app with ``docs_url=None,
    redoc_url=None``)."""
    assets = files("fastapi_offline") / "static"
    app.mount(ASSETS_URL, StaticFiles(directory=str(assets)), name="docs-assets")
    openapi_url = app.openapi_url or "/openapi.json"

    @app.get("/docs", include_in_schema=False)
    async def swagger_page() -> HTMLResponse:
        return get_swagger_ui_html(
            openapi_url=openapi_url,
            title=f"{app.title} - API",
            swagger_js_url=f"{ASSETS_URL}/swagger-ui-bundle.js",
            swagger_css_url=f"{ASSETS_URL}/swagger-ui.css",
            swagger_favicon_url=f"{ASSETS_URL}/favicon.png",
        )
