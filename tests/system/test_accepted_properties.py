"""Accepted means usable, as a property over generated products and histories (#13),
on SQLite and PostgreSQL.

Promise: README "Guarantees", *Accepted means usable*: whatever the API accepts can
afterwards be read back, fitted (or refused with a 4xx that says why), charted (all three
kinds) and reported, never with a 5xx. Hypothesis draws products (any name, extreme
prices and costs) and weekly histories (extreme prices and units, stockouts, a promotion
covariate, periods anywhere in the allowed range); each example uses skus of its own.
"""

from __future__ import annotations

import datetime as dt
import itertools
import os
from pathlib import Path
from typing import Any

import pytest
from fastapi.testclient import TestClient
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from service.ui.report import write_report
from tests.plugins.storage import Database
from tests.plugins.ui_pages import assert_clean_svg

pytestmark = pytest.mark.storage
# Modest for CI (about 15 s a database); MARGINAL_PROPERTY_EXAMPLES=500 for a longer search.
EXAMPLES = int(os.environ.get("MARGINAL_PROPERTY_EXAMPLES", "40"))
FIRST, LAST = dt.date(1900, 1, 1), dt.date(2199, 12, 31)
KINDS = ("demand", "money", "fit-over-time")
_skus = itertools.count(1)

extreme = st.sampled_from([5e-324, 1e-300, 1e-9, 1e9, 1e300, 1.7976931348623157e308])
positive = st.one_of(st.floats(min_value=0.5, max_value=50.0), extreme)
units = st.one_of(st.floats(min_value=0.0, max_value=500.0), extreme, st.just(0.0))
names = st.text(
    alphabet=st.characters(blacklist_categories=["Cs"], blacklist_characters="\x00"),
    min_size=1,
    max_size=60,
).filter(lambda name: name.strip() != "")


@st.composite
def products(draw: st.DrawFn) -> dict[str, Any]:
    fields: dict[str, Any] = {
        "name": draw(st.one_of(names, st.sampled_from([r"$\frac{$", "Cost $5 and $6"]))),
        "currency": draw(st.sampled_from(["EUR", "USD", "JPY", "XXX"])),
    }
    if draw(st.booleans()):
        fields["unit_cost"] = draw(st.one_of(st.just(0.0), positive))
    if draw(st.booleans()):
        fields["current_price"] = draw(positive)
    return fields


@st.composite
def histories(draw: st.DrawFn) -> list[dict[str, Any]]:
    weeks = draw(st.integers(min_value=1, max_value=36))
    span = (LAST - FIRST).days - 7 * weeks
    start = FIRST + dt.timedelta(
        days=draw(st.one_of(st.just(0), st.just(span), st.integers(0, span)))
    )
    smooth = draw(st.booleans())  # a plausible demand curve, so that fits often succeed
    rows = []
    for k in range(weeks):
        price = 4.0 + (k % 5) * 0.5 if smooth else draw(positive)
        row: dict[str, Any] = {
            "period": (start + dt.timedelta(weeks=k)).isoformat(),
            "price": price,
            "units": 200.0 / price + (k % 3) if smooth else draw(units),
        }
        if draw(st.integers(0, 9)) == 0:
            row["in_stock"] = False
        if draw(st.booleans()):
            row["covariates"] = {"promo": float(draw(st.integers(0, 1)))}
        rows.append(row)
    return rows


def _no_server_error(answer: Any, what: str) -> None:
    assert answer.status_code < 500, (what, answer.status_code, answer.text[:500])
    if answer.status_code >= 400:
        assert answer.headers["content-type"] == "application/problem+json", what
        assert answer.json()["detail"], (what, answer.text)


def test_what_is_accepted_can_be_read_fitted_charted_and_reported(
    client: TestClient, headers: dict[str, str], db: Database, tmp_path: Path
) -> None:
    @settings(
        max_examples=EXAMPLES,
        deadline=None,
        database=None,
        suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow],
    )
    @given(product=products(), history=histories(), form=st.sampled_from(["log-log", "linear"]))
    def accepted_is_usable(
        product: dict[str, Any], history: list[dict[str, Any]], form: str
    ) -> None:
        sku = f"PROP-{next(_skus)}"
        base = f"/v1/products/{sku}"
        put = client.put(base, json=product, headers=headers)
        _no_server_error(put, "create")
        if put.status_code >= 400:
            return
        sent = client.post(f"{base}/observations", json={"observations": history}, headers=headers)
        _no_server_error(sent, "observations")
        # Read back: the product and every stored row.
        assert client.get(base, headers=headers).status_code == 200
        stored = client.get(f"{base}/observations", params={"limit": 1000}, headers=headers)
        assert stored.status_code == 200, stored.text
        if sent.status_code == 200:
            assert len(stored.json()["items"]) == len({r["period"] for r in history})
        fit = client.post(f"{base}/fits", json={"spec": {"form": form}}, headers=headers)
        _no_server_error(fit, "fit")
        if fit.status_code == 201 and fit.json()["status"] == "active":
            for body in ({"objective": "profit"}, {"objective": "revenue", "uncertainty_draws": 5}):
                _no_server_error(
                    client.post(f"{base}/optimal-price", json=body, headers=headers), "price"
                )
            _no_server_error(client.get(f"{base}/elasticities", headers=headers), "elasticities")
        for kind in KINDS:
            chart = client.get(f"{base}/charts/{kind}.svg", headers=headers)
            assert chart.status_code == 200, (kind, chart.text[:500])
            assert_clean_svg(chart.content)

    accepted_is_usable()
    # Reported: every product's page and charts are written, none failed.
    summary = write_report(db.settings, tmp_path / "report")
    assert summary.failed == {}, summary.failed
    assert summary.products >= 1
