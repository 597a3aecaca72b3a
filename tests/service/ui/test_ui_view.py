"""The analyst view on both databases: chart content, the chart route, sign-in, pages.

One demo shop per database is fitted and priced once for the module (refit and reprice
jobs over a few products, to stay quick); tests only read it, except where noted.
"""

from __future__ import annotations

import datetime as dt
import logging
import os
import stat
from collections.abc import Iterator
from dataclasses import dataclass
from html import escape
from html.parser import HTMLParser
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from fastapi.testclient import TestClient
from itsdangerous import TimestampSigner, URLSafeTimedSerializer
from pydantic import SecretStr

import models
from service.access.view_session import COOKIE_NAME, session_secret
from service.core.app import create_app
from service.core.db import make_engine, make_session_factory, session_scope
from service.core.settings import Settings
from service.ui import chartbook, chartdata_fit_time, records
from tests.plugins.storage import Database, make_key
from tests.plugins.ui_pages import (
    NO_HISTORY,
    REPRICE,
    assert_clean_svg,
    element,
    gids,
    line_markers,
    markers,
    prepare_shop,
    texts,
)

pytestmark = pytest.mark.storage
GREEN = [f"TEA-00{i}" for i in range(1, 9)]
FITTED = [*GREEN, "TEA-010", "TEA-017", "TEA-021"]  # TEA-017 has too little history to fit
SECRET = "a test secret of more than thirty-two characters"


@dataclass
class Shop:
    settings: Settings
    client: TestClient
    read: str
    write: str
    admin: str

    def api(self, path: str, key: str | None = None) -> Any:
        response = self.client.get(path, headers={"Authorization": f"Bearer {key or self.read}"})
        assert response.status_code == 200, response.text
        return response.json()

    def sign_in(self, client: TestClient | None = None, key: str | None = None) -> TestClient:
        client = client or self.client
        client.cookies.clear()
        response = client.post(
            "/ui/sign-in", data={"key": key or self.read, "next": "/ui/"}, follow_redirects=False
        )
        assert response.status_code == 303, response.text
        return client


@pytest.fixture(scope="module")
def shop(database: Database) -> Iterator[Shop]:
    database.clean()
    settings = database.settings.model_copy(update={"session_secret": SecretStr(SECRET)})
    prepare_shop(settings, skus=FITTED)
    app = create_app(settings)
    with TestClient(app, raise_server_exceptions=False) as client:
        yield Shop(
            settings,
            client,
            read=make_key(settings, "read", name="analyst"),
            write=make_key(settings, "write", name="loader"),
            admin=make_key(settings, "admin", name="admin"),
        )


_drawn: dict[tuple[str, str, str], bytes] = {}


def chart(shop: Shop, sku: str, kind: str) -> bytes:
    """A chart drawn from the module's database (once per database, sku and kind)."""
    key = (shop.settings.database_url + str(shop.settings.database_schema), sku, kind)
    if key not in _drawn:
        engine = make_engine(shop.settings)
        with session_scope(make_session_factory(engine, writer=False)) as session:
            subject = chartbook.subject(session, records.product(session, sku))
            _drawn[key] = chartbook.draw(subject, kind).svg
        engine.dispose()
    return _drawn[key]


def description(root: Any) -> str:
    return str(root.find("{http://www.w3.org/2000/svg}desc").text)


def latest_recommendation(shop: Shop, sku: str) -> dict[str, Any]:
    items = shop.api("/v1/recommendations?limit=100&state=any")["items"]
    return next(item for item in items if item["sku"] == sku)


def observations(shop: Shop, sku: str) -> list[dict[str, Any]]:
    return list(shop.api(f"/v1/products/{sku}/observations?limit=5000")["items"])


# -- chart content ---------------------------------------------------------------------------


def test_demand_chart_shows_the_weeks_the_curve_its_band_and_both_prices(shop: Shop) -> None:
    root = assert_clean_svg(chart(shop, "TEA-002", "demand"))
    assert {
        "observed-range",
        "demand-band",
        "demand-curve",
        "weeks-regular",
        "weeks-promotion",
        "current-price",
        "recommended-price",
    } <= gids(root)
    weeks = observations(shop, "TEA-002")
    drawn = {g: markers(element(root, g)) for g in gids(root) if g.startswith("weeks-")}
    assert sum(drawn.values()) == len(weeks)
    promotions = [w for w in weeks if w["covariates"].get("promo", 0) > 0]
    assert drawn["weeks-promotion"] == len(promotions) > 0
    assert "price (EUR)" in texts(root) and "units per week" in texts(root)
    price = latest_recommendation(shop, "TEA-002")["recommended"]["price"]
    assert f"At the recommended price {price:,.2f} EUR" in description(root)
    model = shop.api("/v1/products/TEA-002/demand-model")
    low, high = model["price_range"]
    assert f"The fit saw prices from {low:,.2f} to {high:,.2f} EUR" in description(root)


def test_stockout_weeks_are_marked_apart_on_both_charts(shop: Shop) -> None:
    out_of_stock = [w for w in observations(shop, "TEA-010") if w["in_stock"] is False]
    assert out_of_stock  # the demo makes this tin run out now and then
    demand = assert_clean_svg(chart(shop, "TEA-010", "demand"))
    assert markers(element(demand, "weeks-stockout")) == len(out_of_stock)
    over_time = assert_clean_svg(chart(shop, "TEA-010", "fit-over-time"))
    assert markers(element(over_time, "stockout-weeks")) == len(out_of_stock)


@pytest.mark.parametrize("sku", ["TEA-002", "TEA-010"])
def test_money_chart_shows_the_stored_recommendation_and_its_uncertainty(
    shop: Shop, sku: str
) -> None:
    root = assert_clean_svg(chart(shop, sku, "money"))
    assert {
        "revenue-curve",
        "profit-curve",
        "feasible-band",
        "best-price",
        "current-price",
        "price-interval",
    } <= gids(root)
    stored = latest_recommendation(shop, sku)
    text = description(root)
    # Same fit, rules and seed as the stored recommendation: the same price and interval.
    assert f"Best price under the rules: {stored['recommended']['price']:,.2f} EUR" in text
    low, high = stored["uncertainty"]["price_interval"]
    draws = REPRICE["uncertainty_draws"]
    assert f"Across {draws} coefficient draws the best price lies between {low:,.2f}" in text
    assert f"{high:,.2f} EUR (90% range)" in text
    if "max_change_pct" in stored["binding_constraints"]:
        assert "held back by the change cap (the largest allowed change)" in text


def _first_linear_sku(shop: Shop) -> str:
    """A demo product whose active fit is linear (R-squared is then 1 - SSR / SST)."""
    for n in range(1, 41):
        sku = f"TEA-{n:03d}"
        response = shop.client.get(
            f"/v1/products/{sku}/demand-model", headers={"Authorization": f"Bearer {shop.read}"}
        )
        if response.status_code == 200 and response.json()["form"] == "linear":
            return sku
    raise AssertionError("the demo catalogue has no product with a linear active fit")


def test_fit_over_time_reproduces_the_fitted_values_and_r_squared(shop: Shop) -> None:
    sku = _first_linear_sku(shop)
    engine = make_engine(shop.settings)
    with session_scope(make_session_factory(engine, writer=False)) as session:
        subject = chartbook.subject(session, records.product(session, sku))
    engine.dispose()
    data = chartdata_fit_time.fit_time_inputs(subject)
    fit, history = subject.fit.fit, subject.history  # type: ignore[union-attr]
    assert fit.form == "linear" and data.fitted is not None and history is not None
    # Independent path: the library's own prediction at each week's recorded values.
    for t in range(history.n_periods):
        values = {k: float(v[t]) for k, v in history.covariates.items() if k in fit.variable_means}
        values |= {k: float(v[t]) for k, v in history.cross_prices.items()}
        expected = models.predict(fit, price=float(history.price[t]), covariates=values)
        assert data.fitted[t] == pytest.approx(expected.expected_units, rel=1e-9, abs=1e-9)
    # R-squared by its definition, 1 - SSR / SST over the weeks that entered the fit.
    used = data.in_fit
    assert int(used.sum()) == fit.quality.n_obs
    actual, fitted = data.actual[used], data.fitted[used]
    r2 = 1 - np.sum((actual - fitted) ** 2) / np.sum((actual - actual.mean()) ** 2)
    assert r2 == pytest.approx(fit.quality.r_squared, rel=1e-9)
    root = assert_clean_svg(chart(shop, sku, "fit-over-time"))
    assert {"actual-units", "fitted-units", "residuals", "holdout-window"} <= gids(root)
    assert line_markers(element(root, "actual-units")) == history.n_periods
    wape = shop.api(f"/v1/products/{sku}/demand-model")["quality"]["holdout_wape"]
    assert f"(WAPE) {wape:.1%}" in description(root)
    assert "week starting" in texts(root) and "residual" in texts(root)


def test_a_rejected_fit_is_drawn_for_diagnosis_but_never_priced(shop: Shop) -> None:
    demand = assert_clean_svg(chart(shop, "TEA-001", "demand"))
    assert "demand-curve" in gids(demand)
    assert "rejected" in "".join(element(demand, "chart-note").itertext())  # type: ignore[union-attr]
    money = assert_clean_svg(chart(shop, "TEA-001", "money"))
    assert "best-price" not in gids(money)
    assert "rejected" in "".join(element(money, "placeholder").itertext())  # type: ignore[union-attr]
    over_time = assert_clean_svg(chart(shop, "TEA-001", "fit-over-time"))
    assert {"fitted-units", "chart-note"} <= gids(over_time)


def test_a_product_without_a_fit_gets_its_weeks_and_clear_placeholders(shop: Shop) -> None:
    weeks = observations(shop, "TEA-017")
    demand = assert_clean_svg(chart(shop, "TEA-017", "demand"))
    assert markers(element(demand, "weeks-regular")) == len(weeks) == 8
    assert "demand-curve" not in gids(demand)
    assert "No demand model" in description(demand)
    money = assert_clean_svg(chart(shop, "TEA-017", "money"))
    assert "placeholder" in gids(money) and "revenue-curve" not in gids(money)
    over_time = assert_clean_svg(chart(shop, "TEA-017", "fit-over-time"))
    assert "actual-units" in gids(over_time) and "fitted-units" not in gids(over_time)


def test_a_product_without_history_gets_three_placeholders(shop: Shop) -> None:
    for kind in ("demand", "money", "fit-over-time"):
        root = assert_clean_svg(chart(shop, NO_HISTORY, kind))
        assert "placeholder" in gids(root), kind
        note = "".join(element(root, "placeholder").itertext())  # type: ignore[union-attr]
        assert "no sales history" in note or "No demand model" in note


# -- the chart route -------------------------------------------------------------------------


def test_the_chart_route_needs_the_read_scope_and_answers_svg(shop: Shop) -> None:
    path = "/v1/products/TEA-005/charts/demand.svg"
    assert shop.client.get(path).status_code == 401
    forbidden = shop.client.get(path, headers={"Authorization": f"Bearer {shop.write}"})
    assert forbidden.status_code == 403
    assert forbidden.headers["content-type"] == "application/problem+json"
    response = shop.client.get(path, headers={"Authorization": f"Bearer {shop.read}"})
    assert response.status_code == 200
    assert response.headers["content-type"].startswith("image/svg+xml")
    assert "private" in response.headers["cache-control"]
    assert response.headers["content-security-policy"].startswith("default-src 'none'")
    assert_clean_svg(response.content)
    missing = shop.client.get(
        "/v1/products/TEA-999/charts/money.svg", headers={"Authorization": f"Bearer {shop.read}"}
    )
    assert missing.status_code == 404
    unknown_kind = shop.client.get(
        "/v1/products/TEA-005/charts/pie.svg", headers={"Authorization": f"Bearer {shop.read}"}
    )
    assert unknown_kind.status_code == 422


def test_charts_revalidate_by_etag_and_change_with_their_inputs(shop: Shop) -> None:
    """Changes TEA-004 (its price and fit); no other test reads that product."""
    read = {"Authorization": f"Bearer {shop.read}"}
    path = "/v1/products/TEA-004/charts/demand.svg"
    first = shop.client.get(path, headers=read)
    etag = first.headers["etag"]
    again = shop.client.get(path, headers={**read, "If-None-Match": etag})
    assert again.status_code == 304 and again.content == b""
    assert again.headers["etag"] == etag
    weak = shop.client.get(path, headers={**read, "If-None-Match": f'"other", W/{etag}'})
    assert weak.status_code == 304
    write = {"Authorization": f"Bearer {shop.write}"}
    assert (
        shop.client.patch("/v1/products/TEA-004", json={"current_price": 24.5}, headers=write)
    ).status_code == 200
    repriced = shop.client.get(path, headers={**read, "If-None-Match": etag})
    assert repriced.status_code == 200 and repriced.headers["etag"] != etag
    assert "At the current price 24.50 EUR" in description(assert_clean_svg(repriced.content))
    refit = shop.client.post("/v1/products/TEA-004/fits", json={}, headers=write)
    assert refit.status_code == 201
    after = shop.client.get(path, headers={**read, "If-None-Match": repriced.headers["etag"]})
    assert after.status_code == 200 and after.headers["etag"] != repriced.headers["etag"]


# -- signing in ------------------------------------------------------------------------------


def test_pages_send_strangers_to_the_sign_in_form(shop: Shop) -> None:
    client = shop.client
    client.cookies.clear()
    catalogue = client.get("/ui/", follow_redirects=False)
    assert catalogue.status_code == 303 and catalogue.headers["location"] == "/ui/sign-in"
    product = client.get("/ui/products/TEA-002", follow_redirects=False)
    assert product.headers["location"] == "/ui/sign-in?next=%2Fui%2Fproducts%2FTEA-002"
    assert client.get("/ui/products/TEA-002/charts/demand.svg").status_code == 401
    form = client.get("/ui/sign-in")
    assert form.status_code == 200 and 'method="post"' in form.text
    assert 'type="password"' in form.text
    # A key in the address is ignored: addresses end up in logs and browser histories.
    client.get(f"/ui/sign-in?key={shop.read}")
    assert COOKIE_NAME not in client.cookies
    assert client.get("/ui/", follow_redirects=False).status_code == 303


@pytest.mark.parametrize(
    ("key", "message"),
    [
        ("mk_unknown_key", "not accepted"),
        ("", "Enter a key"),
        ("write", "lacks the read scope"),
    ],
)
def test_sign_in_refuses_keys_that_cannot_read(shop: Shop, key: str, message: str) -> None:
    shop.client.cookies.clear()
    given = shop.write if key == "write" else key
    response = shop.client.post("/ui/sign-in", data={"key": given}, follow_redirects=False)
    assert response.status_code == 401
    assert message in response.text
    assert "set-cookie" not in response.headers
    assert given == "" or given not in response.text  # the key is never echoed back


def test_sign_in_sets_a_signed_http_only_strict_cookie_and_sign_out_clears_it(
    shop: Shop,
) -> None:
    client = shop.client
    client.cookies.clear()
    response = client.post(
        "/ui/sign-in",
        data={"key": shop.read, "next": "/ui/products/TEA-002"},
        follow_redirects=False,
    )
    assert response.status_code == 303
    assert response.headers["location"] == "/ui/products/TEA-002"
    cookie = response.headers["set-cookie"]
    assert cookie.startswith(f"{COOKIE_NAME}=")
    assert "HttpOnly" in cookie and "SameSite=strict" in cookie and "Path=/ui" in cookie
    assert f"Max-Age={8 * 3600}" in cookie and "Secure" not in cookie  # plain HTTP here
    value = cookie.split(";")[0].split("=", 1)[1]
    key_id, secret = shop.read.split("_")[1], shop.read.split("_", 2)[2]
    assert secret not in value
    payload = URLSafeTimedSerializer(SECRET, salt="marginal.ui.session").loads(value)
    # The key's id and its sign-out count, signed; nothing else.
    assert set(payload) == {"key", "generation"} and payload["key"] == key_id
    assert client.get("/ui/products/TEA-002").status_code == 200
    out = client.post("/ui/sign-out", follow_redirects=False)
    assert out.status_code == 303 and out.headers["location"] == "/ui/sign-in?signed_out"
    assert "Max-Age=0" in out.headers["set-cookie"]
    assert COOKIE_NAME not in client.cookies
    assert client.get("/ui/", follow_redirects=False).status_code == 303
    assert "You are signed out" in client.get("/ui/sign-in?signed_out").text


def test_the_cookie_is_secure_over_https_and_when_told(shop: Shop) -> None:
    app = shop.client.app
    with TestClient(app, base_url="https://testserver") as client:  # type: ignore[arg-type]
        response = client.post("/ui/sign-in", data={"key": shop.read}, follow_redirects=False)
        assert "Secure" in response.headers["set-cookie"]
    always = create_app(shop.settings.model_copy(update={"session_cookie_secure": "always"}))
    with TestClient(always) as client:
        response = client.post("/ui/sign-in", data={"key": shop.read}, follow_redirects=False)
        assert "Secure" in response.headers["set-cookie"]


def test_tampered_expired_and_revoked_sessions_are_refused(shop: Shop) -> None:
    client = shop.sign_in(key=make_key(shop.settings, "read", name="short-lived"))
    good = client.cookies[COOKIE_NAME]
    key_id = URLSafeTimedSerializer(SECRET, salt="marginal.ui.session").loads(good)["key"]
    assert client.get("/ui/", follow_redirects=False).status_code == 200

    client.cookies.clear()
    client.cookies.set(COOKIE_NAME, good[:-2] + ("AA" if not good.endswith("AA") else "BB"))
    assert client.get("/ui/", follow_redirects=False).status_code == 303

    class Yesterday(TimestampSigner):
        def get_timestamp(self) -> int:
            return int(dt.datetime.now(dt.UTC).timestamp()) - 86_400

    client.cookies.clear()
    signed_long_ago = URLSafeTimedSerializer(SECRET, salt="marginal.ui.session", signer=Yesterday)
    stale = signed_long_ago.dumps({"key": key_id})
    client.cookies.set(COOKIE_NAME, stale)
    assert client.get("/ui/", follow_redirects=False).status_code == 303

    client.cookies.clear()
    client.cookies.set(COOKIE_NAME, good)
    assert client.get("/ui/", follow_redirects=False).status_code == 200
    revoked = client.delete(
        f"/v1/api-keys/{key_id}", headers={"Authorization": f"Bearer {shop.admin}"}
    )
    assert revoked.status_code in (200, 204)
    assert client.get("/ui/", follow_redirects=False).status_code == 303
    client.cookies.clear()


@pytest.mark.parametrize(
    "target",
    [
        "https://elsewhere.example/ui/",
        "//elsewhere.example/ui/",
        "/ui/../v1/products",
        "/v1/products",
        "/ui/\\elsewhere.example",
        "/ui/sign-out",
    ],
)
def test_sign_in_returns_only_to_these_pages(shop: Shop, target: str) -> None:
    shop.client.cookies.clear()
    response = shop.client.post(
        "/ui/sign-in", data={"key": shop.read, "next": target}, follow_redirects=False
    )
    assert response.status_code == 303 and response.headers["location"] == "/ui/"


def test_a_form_with_too_many_fields_is_refused_cleanly(shop: Shop) -> None:
    shop.client.cookies.clear()
    body = "&".join(f"f{i}=x" for i in range(50))
    response = shop.client.post(
        "/ui/sign-in",
        content=body,
        headers={"content-type": "application/x-www-form-urlencoded"},
    )
    assert response.status_code == 401 and "Enter a key" in response.text


def test_signing_in_from_another_site_is_refused(shop: Shop) -> None:
    shop.client.cookies.clear()
    response = shop.client.post(
        "/ui/sign-in",
        data={"key": shop.read},
        headers={"Origin": "https://elsewhere.example"},
        follow_redirects=False,
    )
    assert response.status_code == 403 and "set-cookie" not in response.headers


def test_keys_never_reach_the_logs_or_an_address(
    shop: Shop, caplog: pytest.LogCaptureFixture
) -> None:
    secret = shop.read.split("_", 2)[2]
    with caplog.at_level(logging.DEBUG):
        client = shop.sign_in()
        visited = [client.get(p) for p in ("/ui/", "/ui/products/TEA-002")]
        client.get("/ui/products/TEA-002/charts/money.svg")
        client.post("/ui/sign-in", data={"key": shop.read + "x"})
        client.post("/ui/sign-out")
    assert caplog.records, "the access log should have recorded the requests"
    for record in caplog.records:
        assert secret not in repr(vars(record)), record
    assert all(secret not in str(r.url) for r in visited)
    assert any(getattr(r, "key_id", None) == shop.read.split("_")[1] for r in caplog.records)


def test_the_session_secret_file_is_created_once_and_kept_private(tmp_path: Path) -> None:
    settings = Settings(
        database_url="sqlite://", session_secret_file=tmp_path / "var" / "session-secret"
    )
    first = session_secret(settings)
    path = settings.session_secret_file
    assert stat.S_IMODE(os.stat(path).st_mode) == 0o600
    assert len(first) == 64 and path.read_text().strip() == first
    again = Settings(database_url="sqlite://", session_secret_file=path)
    assert session_secret(again) == first  # another worker of the host signs alike
    given = Settings(database_url="sqlite://", session_secret=SecretStr(SECRET))
    assert session_secret(given) == SECRET


# -- pages -----------------------------------------------------------------------------------


class TableRows(HTMLParser):
    """Rows of the first table body: per row, each cell's data-sort-value and text."""

    def __init__(self) -> None:
        super().__init__()
        self.rows: list[list[tuple[str | None, str]]] = []
        self.headers: list[dict[str, str | None]] = []
        self._in_body = self._in_head = False
        self._cell: list[str] | None = None
        self._value: str | None = None

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        if tag == "tbody" and not self.rows:
            self._in_body = True
        elif tag == "thead":
            self._in_head = True
        elif tag == "tr" and self._in_body:
            self.rows.append([])
        elif tag in ("td", "th") and self._in_body:
            self._cell, self._value = [], dict(attrs).get("data-sort-value")
        elif tag == "th" and self._in_head:
            self.headers.append(dict(attrs))

    def handle_endtag(self, tag: str) -> None:
        if tag == "tbody":
            self._in_body = False
        elif tag == "thead":
            self._in_head = False
        elif tag in ("td", "th") and self._cell is not None:
            self.rows[-1].append((self._value, " ".join("".join(self._cell).split())))
            self._cell = None

    def handle_data(self, data: str) -> None:
        if self._cell is not None:
            self._cell.append(data)


def table(html: str) -> TableRows:
    parser = TableRows()
    parser.feed(html)
    return parser


# Catalogue columns: prices first, so they stay on narrow screens.
CURRENT, RECOMMENDED, CHANGE, HELD_BY, ELASTICITY, WARNINGS = 1, 2, 3, 4, 6, 11


def test_the_catalogue_lists_every_product_with_its_figures(shop: Shop) -> None:
    client = shop.sign_in()
    response = client.get("/ui/")
    assert response.status_code == 200
    assert "default-src 'none'" in response.headers["content-security-policy"]
    assert response.headers["cache-control"] == "no-store"
    parsed = table(response.text)
    skus = [row[0][0] for row in parsed.rows]
    listed = [p["sku"] for p in shop.api("/v1/products?limit=200")["items"]]
    assert skus == sorted(listed) and NO_HISTORY in skus
    assert all(h.get("scope") == "col" for h in parsed.headers)
    by_sku = {row[0][0]: row for row in parsed.rows}
    own = shop.api("/v1/products/TEA-002/elasticities")["elasticities"][0]
    cell = by_sku["TEA-002"][ELASTICITY]
    assert float(cell[0] or "nan") == pytest.approx(own["value"], rel=1e-12)
    assert own["class"] in cell[1]
    stored = latest_recommendation(shop, "TEA-002")
    assert by_sku["TEA-002"][CURRENT][1] == f"{stored['current']['price']:,.2f}"
    assert by_sku["TEA-002"][RECOMMENDED][1] == f"{stored['recommended']['price']:,.2f}"
    assert "rejected fit" in by_sku["TEA-001"][WARNINGS][1]
    assert "wrong sign" in by_sku["TEA-001"][ELASTICITY][1]
    assert "not fitted" in by_sku["TEA-017"][WARNINGS][1]
    codes = {w["code"] for w in shop.api("/v1/products/TEA-003/demand-model")["warnings"]}
    assert "own_price_not_significant" in codes
    assert "price effect unclear" in by_sku["TEA-003"][WARNINGS][1]


def test_the_catalogue_sorts_on_the_server_and_filters_by_family(shop: Shop) -> None:
    client = shop.sign_in()
    ascending = table(client.get("/ui/?sort=elasticity").text).rows
    values = [row[ELASTICITY][0] for row in ascending]
    numbers = [float(v) for v in values if v]
    assert numbers == sorted(numbers) and len(numbers) >= len(FITTED) - 1
    assert all(not v for v in values[len(numbers) :])  # products without a fit come last
    descending = table(client.get("/ui/?sort=elasticity&order=desc").text).rows
    assert [float(r[ELASTICITY][0]) for r in descending[: len(numbers)]] == numbers[::-1]
    green = table(client.get("/ui/?family=green").text).rows
    assert [row[0][0] for row in green] == [*GREEN, NO_HISTORY]
    page = client.get("/ui/?family=green&sort=change_pct&order=desc").text
    assert 'aria-sort="descending"' in page and 'value="green" selected' in page


def test_the_product_page_explains_the_model_and_its_history(shop: Shop) -> None:
    client = shop.sign_in()
    response = client.get("/ui/products/TEA-002")
    assert response.status_code == 200
    html = response.text
    model = shop.api("/v1/products/TEA-002/demand-model")
    assert escape(model["equation"]) in html
    for row in model["coefficients"]:
        assert f"<code>{escape(row['term'])}</code>" in html
    for heading in ("Estimate", "Std. error", "p-value", "95% interval", "VIF"):
        assert f'<th scope="col" class="num">{heading}</th>' in html
    for name in ("Durbin-Watson", "Breusch-Pagan p-value", "Jarque-Bera p-value"):
        assert name in html
    for kind in ("demand", "money", "fit-over-time"):
        assert f'src="/ui/products/TEA-002/charts/{kind}.svg"' in html
        assert f'aria-describedby="numbers-{kind}"' in html
    assert "The numbers in this chart" in html and "Pricing cautions" in html
    assert "Fits, newest first" in html and "Recommendations, newest first" in html
    stored = latest_recommendation(shop, "TEA-002")
    assert f"{stored['recommended']['price']:,.2f} EUR" in html
    rejected = client.get("/ui/products/TEA-001").text
    assert "rejected by the quality gates" in rejected and "✗ failed" in rejected
    assert "no wrong sign" in rejected and "wrong_sign" not in rejected
    empty = client.get(f"/ui/products/{NO_HISTORY}")
    assert empty.status_code == 200 and "No fit has been made" in empty.text
    missing = client.get("/ui/products/TEA-999")
    assert missing.status_code == 404 and "no product with sku TEA-999" in missing.text
    for kind in ("demand", "money", "fit-over-time"):
        svg = client.get(f"/ui/products/TEA-002/charts/{kind}.svg")
        assert svg.status_code == 200 and svg.headers["etag"]
        assert_clean_svg(svg.content)


def test_numbers_on_pages_are_finite_or_marked_missing(shop: Shop) -> None:
    client = shop.sign_in()
    for path in ("/ui/", "/ui/products/TEA-010", "/ui/products/TEA-017"):
        html = client.get(path).text
        for word in ("nan", "inf", "None"):
            assert f">{word}<" not in html and f" {word} " not in html, (path, word)


def test_any_product_name_draws_without_warnings_into_well_formed_svg(shop: Shop) -> None:
    # A name may hold control characters (not allowed in XML) and scripts the bundled
    # font lacks; every chart still renders, well-formed, with no warning raised.
    path = "/v1/products/TEA-021"
    before = shop.api(path)["name"]
    admin = {"Authorization": f"Bearer {shop.write}"}
    renamed = shop.client.patch(path, json={"name": "Gyokuro \x1b[31m 玉露 \x07tin"}, headers=admin)
    assert renamed.status_code == 200, renamed.text
    try:
        engine = make_engine(shop.settings)
        with session_scope(make_session_factory(engine, writer=False)) as session:
            subject = chartbook.subject(session, records.product(session, "TEA-021"))
            drawn = [chartbook.draw(subject, k).svg for k in ("demand", "money", "fit-over-time")]
        engine.dispose()
        for svg in drawn:
            root = assert_clean_svg(svg)
            title = root.find("{http://www.w3.org/2000/svg}title")
            assert title is not None and "玉露" in (title.text or "") and "\x1b" not in title.text
    finally:
        shop.client.patch(path, json={"name": before}, headers=admin)


# Codes a person should never read on a page: quality gates, constraints, warnings, optima.
SCREEN_CODES = (
    "wrong_sign",
    "price_variation",
    "enough_observations",
    "holdout_not_worse",
    "max_change_pct",
    "min_margin_pct",
    "max_total_change_pct",
    "observed_price_range",
    "min_price",
    "max_price",
    "price_step",
    "price_endings",
    "held_by_constraint",
    "no_finite_optimum",
    "standard_errors",
    "own_price_not_significant",
    "price_outside_observed_range",
    "wrong_sign_draws",
    "wrong_sign_allowed",
)


class VisibleText(HTMLParser):
    """Text a reader sees or hovers over: element text and title attributes."""

    def __init__(self) -> None:
        super().__init__()
        self.parts: list[str] = []
        self._skip = 0

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        self._skip += tag in ("script", "style")
        self.parts += [v for k, v in attrs if k in ("title", "alt") and v]

    def handle_endtag(self, tag: str) -> None:
        self._skip -= tag in ("script", "style")

    def handle_data(self, data: str) -> None:
        if not self._skip:
            self.parts.append(data)


def visible_text(html: str) -> str:
    parser = VisibleText()
    parser.feed(html)
    return " ".join(parser.parts)


def test_pages_show_plain_words_not_codes(shop: Shop) -> None:
    client = shop.sign_in()
    paths = ["/ui/", "/ui/?family=green"]
    paths += [f"/ui/products/{sku}" for sku in ("TEA-001", "TEA-002", "TEA-003", "TEA-017")]
    for path in paths:
        text = visible_text(client.get(path).text)
        found = [code for code in SCREEN_CODES if code in text]
        assert found == [], (path, found)
        assert "R-squared" not in text and "holdout" not in text.replace("holdout_", ""), path
    # The sentence the diagnostics used to end with, in the spec's own code.
    assert "consider standard_errors" not in visible_text(client.get("/ui/products/TEA-003").text)


def test_the_catalogue_says_what_holds_each_price(shop: Shop) -> None:
    client = shop.sign_in()
    rows = {row[0][0]: row for row in table(client.get("/ui/").text).rows}
    capped = held = 0
    for sku in FITTED:
        stored = next(
            (
                r
                for r in shop.api("/v1/recommendations?limit=100&state=any")["items"]
                if r["sku"] == sku
            ),
            None,
        )
        cell = rows[sku][HELD_BY][1]
        if stored is None:
            assert cell == "–", sku
            continue
        held += 1
        if "max_change_pct" in stored["binding_constraints"]:
            capped += 1
            assert cell == "change cap", (sku, cell)
            assert abs(abs(stored["change_pct"]) - 10) < 0.1
        elif not stored["binding_constraints"]:
            assert stored["optimum"] == "interior" and cell == "none", (sku, cell)
    assert held >= 5 and capped >= 1  # the demo's 10% cap holds some prices, not all
    page = client.get("/ui/products/TEA-003").text
    versions = shop.api("/v1/products/TEA-003/fits")["items"]
    # A fit is named by its version, never by its database id.
    assert '<th scope="col" class="num">Fit version</th>' in page
    assert "Earlier fits and recommendations" in page and ">History<" not in page
    assert {v["version"] for v in versions} == {1}


def test_prices_on_pages_are_in_the_currency_minor_unit(shop: Shop) -> None:
    client = shop.sign_in()
    rows = {row[0][0]: row for row in table(client.get("/ui/").text).rows}
    for sku in FITTED:
        for column in (CURRENT, RECOMMENDED):
            text = rows[sku][column][1].split()[0] if rows[sku][column][1] else "–"
            assert text == "–" or len(text.split(".")[1]) == 2, (sku, text)
