"""Charts of whatever the API accepted: names with dollar signs, extreme prices, periods at
the ends of the allowed range (#13 items 3 and 5), on SQLite and PostgreSQL.

The promise is README's "Accepted means usable": what is stored can be read back, fitted,
charted and reported. Each chart kind answers 200 over the API and in the analyst view,
and ``marginal report`` writes every page.
"""

from __future__ import annotations

import datetime as dt
from pathlib import Path

import pytest
from fastapi.testclient import TestClient
from pydantic import SecretStr

from service.core.app import create_app
from service.ui.report import write_report
from tests.plugins.storage import Database
from tests.plugins.ui_pages import assert_clean_svg, texts

pytestmark = pytest.mark.storage

KINDS = ("demand", "money", "fit-over-time")
WEEKS = 40


def _shop_product(
    client: TestClient,
    headers: dict[str, str],
    sku: str,
    *,
    name: str = "Sencha tin",
    current_price: float = 5.0,
    first: dt.date = dt.date(2024, 1, 1),
    price_scale: float = 1.0,
) -> None:
    """A product with a clean weekly history and an active fit, all through the API."""
    fields = {"name": name, "currency": "EUR", "unit_cost": 1.0 * price_scale}
    put = client.put(
        f"/v1/products/{sku}", json={**fields, "current_price": current_price}, headers=headers
    )
    assert put.status_code == 201, put.text
    rows = [
        {
            "period": (first + dt.timedelta(weeks=k)).isoformat(),
            "price": (4.0 + (k % 5) * 0.5) * price_scale,
            "units": 100.0 - 10.0 * (k % 5) + (k % 3),
        }
        for k in range(WEEKS)
    ]
    sent = client.post(
        f"/v1/products/{sku}/observations", json={"observations": rows}, headers=headers
    )
    assert sent.status_code == 200, sent.text
    fit = client.post(
        f"/v1/products/{sku}/fits", json={"spec": {"form": "log-log"}}, headers=headers
    )
    assert fit.status_code == 201, fit.text
    assert fit.json()["status"] == "active", fit.text
    price = client.post(
        f"/v1/products/{sku}/optimal-price", json={"objective": "profit"}, headers=headers
    )
    assert price.status_code in (200, 201, 422), price.text


def _charts(client: TestClient, headers: dict[str, str], sku: str) -> dict[str, str]:
    """Every chart kind of the product over the API: 200 and a clean SVG; its drawn text."""
    drawn = {}
    for kind in KINDS:
        answer = client.get(f"/v1/products/{sku}/charts/{kind}.svg", headers=headers)
        assert answer.status_code == 200, (kind, answer.text[:400])
        drawn[kind] = texts(assert_clean_svg(answer.content))
    return drawn


def _view_charts(db: Database, key_header: dict[str, str], sku: str) -> None:
    """The same charts through the analyst view (signed in with the same key)."""
    settings = db.settings.model_copy(
        update={"session_secret": SecretStr("a view secret of more than thirty-two characters")}
    )
    with TestClient(create_app(settings), raise_server_exceptions=False) as view:
        key = key_header["Authorization"].removeprefix("Bearer ")
        signed = view.post("/ui/sign-in", data={"key": key, "next": "/ui/"}, follow_redirects=False)
        assert signed.status_code == 303, signed.text
        page = view.get(f"/ui/products/{sku}")
        assert page.status_code == 200, page.text[:400]
        for kind in KINDS:
            answer = view.get(f"/ui/products/{sku}/charts/{kind}.svg")
            assert answer.status_code == 200, (kind, answer.text[:400])
            assert_clean_svg(answer.content)


def _report_has_every_page(db: Database, out: Path) -> None:
    summary = write_report(db.settings, out)
    assert summary.failed == {}, summary.failed


@pytest.mark.parametrize("name", [r"$\frac{$", "Cost $5 and $6", r"$x^2$ and \$"])
def test_names_with_dollar_signs_are_drawn_literally(
    client: TestClient, headers: dict[str, str], db: Database, tmp_path: Path, name: str
) -> None:
    # Item 3: matplotlib read $...$ as a formula: a 500 for every chart, or a name drawn
    # as mathematics. Product text is drawn as it was written.
    _shop_product(client, headers, "TEA-NAME", name=name)
    for kind, drawn in _charts(client, headers, "TEA-NAME").items():
        assert name in drawn, (kind, drawn[:300])
    _view_charts(db, headers, "TEA-NAME")
    _report_has_every_page(db, tmp_path)


@pytest.mark.parametrize("current_price", [1e308, 5e-324])
def test_products_with_extreme_current_prices_chart(
    client: TestClient, headers: dict[str, str], db: Database, tmp_path: Path, current_price: float
) -> None:
    # Item 5: the API accepts any finite positive price (tests/system/test_hostile_numbers.py
    # relies on it); the money chart divided by zero at such prices.
    _shop_product(client, headers, "TEA-PRICE", current_price=current_price)
    drawn = _charts(client, headers, "TEA-PRICE")
    # The curves are drawn at the prices seen; the note names the price left off the axis.
    assert "lies far outside the prices the fit saw" in drawn["demand"]
    assert "expected units (fitted curve)" in drawn["demand"]
    assert "the latest week's price 6 stands in for it" in drawn["money"]
    assert "revenue (price x expected units)" in drawn["money"]
    _view_charts(db, headers, "TEA-PRICE")
    _report_has_every_page(db, tmp_path)


LAST_WEEK = dt.date(2199, 12, 31)


@pytest.mark.parametrize(
    "first",
    [dt.date(1900, 1, 1), LAST_WEEK - dt.timedelta(weeks=WEEKS - 1)],
    ids=["first-allowed-period", "last-allowed-period"],
)
def test_histories_at_the_ends_of_the_period_range_chart(
    client: TestClient, headers: dict[str, str], db: Database, tmp_path: Path, first: dt.date
) -> None:
    # Item 5: periods from 1900-01-01 to 2199-12-31 are accepted (README "Limits"); the
    # fit-over-time chart's date axis must hold them, including the week after the last.
    _shop_product(client, headers, "TEA-DATES", first=first)
    drawn = _charts(client, headers, "TEA-DATES")
    assert str(first.year) in drawn["fit-over-time"]
    _view_charts(db, headers, "TEA-DATES")
    _report_has_every_page(db, tmp_path)


def test_counts_in_chart_texts_take_the_right_number() -> None:
    # Issue #15: "1 week", "8 weeks" — never "1 weeks".
    from service.ui.words import plural

    assert plural(1, "week") == "1 week" and plural(8, "week") == "8 weeks"
    assert plural(0, "promotion week") == "0 promotion weeks"
    assert plural(1, "fitted week") == "1 fitted week"
