"""The interactive API documentation renders with no network: its assets come from the
installed package, not from a CDN (checked in a real browser with every request that
leaves this machine blocked)."""

from __future__ import annotations

from pathlib import Path
from urllib.parse import urlparse

import pytest
from playwright.sync_api import Browser, Route

from service.core.app import create_app
from tests.plugins.live_server import serve
from tests.plugins.storage import Database


@pytest.mark.storage
def test_the_api_docs_render_with_the_network_blocked(
    db: Database, browser: Browser, screenshots: Path
) -> None:
    if db.settings.database_schema:
        pytest.skip("the page does not touch the database; SQLite is enough")
    blocked: list[str] = []

    def only_this_machine(route: Route) -> None:
        if urlparse(route.request.url).hostname in ("127.0.0.1", "localhost"):
            route.continue_()
        else:
            blocked.append(route.request.url)
            route.abort()

    with serve(create_app(db.settings)) as base:
        context = browser.new_context(viewport={"width": 1280, "height": 900})
        context.route("**/*", only_this_machine)
        page = context.new_page()
        page.goto(f"{base}/docs")
        # The page draws the operations of the document once its script has run.
        page.get_by_text("Recommend the revenue- or profit-maximising price").first.wait_for(
            state="attached", timeout=20_000
        )
        page.screenshot(path=str(screenshots / "api-docs.png"))
        context.close()
    assert blocked == [], f"the page asked the network for {blocked}"
