"""The analyst's view: SVG charts over the API, server-rendered pages under /ui, and the
static report (`marginal report`)."""

from __future__ import annotations

from starlette.staticfiles import StaticFiles

from service.ui.links import STATIC_URL
from service.ui.routes import router
from service.ui.templating import STATIC_DIR


def static_files() -> StaticFiles:
    """The pages' stylesheet and script, served at :data:`STATIC_URL`."""
    return StaticFiles(directory=STATIC_DIR)


__all__ = ["STATIC_URL", "router", "static_files"]
