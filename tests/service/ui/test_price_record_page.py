"""The product page shows the price record (each live price, who approved it, the prior
price) and the recent changes to the product from the audit log."""

from __future__ import annotations

from html import escape

import pytest
from fastapi.testclient import TestClient
from pydantic import SecretStr

from service.core.app import create_app
from tests.plugins.review_cases import key_headers, linear_product, store_recommendation
from tests.plugins.storage import Database, make_key

pytestmark = pytest.mark.storage
SECRET = "a test secret of more than thirty-two characters"


def test_the_product_page_shows_the_price_record_and_recent_changes(db: Database) -> None:
    settings = db.settings.model_copy(update={"session_secret": SecretStr(SECRET)})
    writer = key_headers(settings, "read", "write")
    approver = key_headers(settings, "approve")
    with TestClient(create_app(settings)) as client:
        linear_product(client, writer, "PAGE-1", current=17.0)
        empty = _page(client, settings)
        assert "No price has been approved for this product yet" in empty
        first = store_recommendation(client, writer, "PAGE-1")
        client.post(
            f"/v1/recommendations/{first['id']}/approve",
            json={"price": 16.5, "note": "first shelf price"},
            headers=approver,
        )
        second = store_recommendation(client, writer, "PAGE-1")
        client.post(
            f"/v1/recommendations/{second['id']}/decline",
            json={"note": "wait a week"},
            headers=approver,
        )
        html = _page(client, settings)
    approver_id = approver["Authorization"].split("_")[1]
    assert "Price record" in html
    assert (
        "Live price now: 16.50." in html and "Lowest price in the 30 days before now: 16.50" in html
    )
    assert escape("first shelf price") in html and f"key {approver_id}" in html
    # The recommendations table says where each stands, the approved one at its edited price.
    assert "approved at 16.50" in html and "declined" in html
    # The audit log's entries about the product, newest first.
    changes = html[html.index("Recent changes to this product") :]
    assert changes.index("decline recommendation") < changes.index("approve recommendation")
    assert changes.index("approve recommendation") < changes.index("create fit")


def _page(client: TestClient, settings: object) -> str:
    client.cookies.clear()
    key = make_key(settings, "read")  # type: ignore[arg-type]
    signed = client.post("/ui/sign-in", data={"key": key, "next": "/ui/"}, follow_redirects=False)
    assert signed.status_code == 303, signed.text
    page = client.get("/ui/products/PAGE-1")
    assert page.status_code == 200, page.text
    return page.text
