"""Family price requests the API must refuse with 422 rather than fail on (#13 items 5
and 8), on SQLite and PostgreSQL.

Promises: README "Errors" (422 is invalid input, with `errors`; no 5xx for a request the
API accepted) and "Recommended prices" (a family is priced jointly into one total, so its
products must share one currency).
"""

from __future__ import annotations

import datetime as dt
from typing import Any

import pytest
from fastapi.testclient import TestClient

from tests.plugins.storage import Database, row_count

pytestmark = pytest.mark.storage
WEEKS = 40


def _fitted(
    client: TestClient,
    headers: dict[str, str],
    sku: str,
    *,
    currency: str = "EUR",
    base: float = 100.0,
) -> None:
    fields = {"name": f"Tin {sku}", "family": "green", "currency": currency, "unit_cost": 1.0}
    assert client.put(f"/v1/products/{sku}", json=fields, headers=headers).status_code == 201
    rows = [
        {
            "period": (dt.date(2024, 1, 1) + dt.timedelta(weeks=k)).isoformat(),
            "price": 4.0 + (k % 5) * 0.5,
            "units": base - 10.0 * (k % 5) + (k % 3),
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
    assert fit.status_code == 201 and fit.json()["status"] == "active", fit.text


def _family(client: TestClient, headers: dict[str, str], body: dict[str, Any]) -> Any:
    return client.post("/v1/families/green/optimal-prices", json=body, headers=headers)


@pytest.mark.parametrize(
    "scenario",
    [
        {"x": []},
        {"x": "warm"},
        {"x": None},
        {"x": {"y": {"z": 1.0}}},
        {"TEA-F1": {"x": [1.0]}},
        {"TEA-F1": 2.0, "x": {"y": "1"}},
        [1.0],
        "promo",
    ],
)
def test_a_family_scenario_of_other_than_numbers_is_refused(
    client: TestClient, headers: dict[str, str], db: Database, scenario: Any
) -> None:
    # Item 5: lists, text, null and nesting reached the library and answered 500.
    _fitted(client, headers, "TEA-F1")
    _fitted(client, headers, "TEA-F2", base=80.0)
    answer = _family(client, headers, {"scenario": scenario})
    assert answer.status_code == 422, answer.text
    assert answer.headers["content-type"] == "application/problem+json"
    assert answer.json()["errors"], answer.text
    assert row_count(db.settings, "recommendations") == 0


def test_a_family_scenario_of_numbers_is_priced(
    client: TestClient, headers: dict[str, str], db: Database
) -> None:
    # The documented shapes still work: shared values, or {sku: {name: value}}.
    _fitted(client, headers, "TEA-F1")
    _fitted(client, headers, "TEA-F2", base=80.0)
    for scenario in ({}, {"TEA-F1": {}}, {"TEA-F1": {}, "TEA-F2": {}}):
        answer = _family(client, headers, {"scenario": scenario})
        assert answer.status_code == 200, (scenario, answer.text)
    unknown = _family(client, headers, {"scenario": {"TEA-F1": {"weather": 1.0}}})
    assert unknown.status_code == 422, unknown.text


def test_a_family_of_mixed_currencies_is_refused_naming_each_product(
    client: TestClient, headers: dict[str, str], db: Database
) -> None:
    # Item 8: a USD product in a EUR family was added into one EUR total. The refusal
    # names every priced product with its currency, and nothing is stored.
    _fitted(client, headers, "TEA-F1")
    _fitted(client, headers, "TEA-F2", base=80.0)
    _fitted(client, headers, "TEA-F3", currency="USD", base=90.0)
    answer = _family(client, headers, {})
    assert answer.status_code == 422, answer.text
    body = answer.json()
    for words in ("TEA-F1 (EUR)", "TEA-F2 (EUR)", "TEA-F3 (USD)", "more than one currency"):
        assert words in body["detail"], body["detail"]
    assert {e["message"] for e in body["errors"]} == {
        "TEA-F1 is priced in EUR",
        "TEA-F2 is priced in EUR",
        "TEA-F3 is priced in USD",
    }
    assert row_count(db.settings, "recommendations") == 0
    # One currency again: the family is priced.
    patched = client.patch("/v1/products/TEA-F3", json={"currency": "EUR"}, headers=headers)
    assert patched.status_code == 200, patched.text
    assert _family(client, headers, {}).status_code == 200


@pytest.mark.parametrize("flag", [0, 1, "yes"])
def test_pricing_switches_are_true_or_false_only(
    client: TestClient, headers: dict[str, str], db: Database, flag: object
) -> None:
    # Found by scripts/fuzz (on jobs): a number or text was taken for a boolean.
    _fitted(client, headers, "TEA-F1")
    for path, body in (
        ("/v1/products/TEA-F1/optimal-price", {"allow_wrong_sign": flag}),
        ("/v1/products/TEA-F1/optimal-price", {"constraints": {"allow_extrapolation": flag}}),
        ("/v1/families/green/optimal-prices", {"allow_wrong_sign": flag}),
    ):
        answer = client.post(path, json=body, headers=headers)
        assert answer.status_code == 422, (path, body, answer.text)
    assert row_count(db.settings, "recommendations") == 0


def test_family_answer_carries_the_value_of_knowing_with_draws(
    client: TestClient, headers: dict[str, str], db: Database
) -> None:
    # The family total reports what knowing the demand curves would be worth when the
    # request asks for coefficient draws, and null without them (docs: "Recommended
    # prices"); the figure is an expected loss, never negative (floored per draw).
    _fitted(client, headers, "TEA-A")
    _fitted(client, headers, "TEA-B", base=120.0)
    plain = _family(client, headers, {})
    assert plain.status_code == 200, plain.text
    assert plain.json()["total"]["value_of_knowing"] is None
    drawn = _family(client, headers, {"uncertainty_draws": 200})
    assert drawn.status_code == 200, drawn.text
    value = drawn.json()["total"]["value_of_knowing"]
    assert value is not None and value >= 0.0
