"""Choosing the price under uncertainty over HTTP: `decide_by`, `no_harm_check` and the
value of knowing.

Exact linear demand q = 2000 - 100 p (prices 8 to 16, unit cost 4) has its profit optimum
at (2000 / 100 + 4) / 2 = 12 (closed form: maximise (p - c)(a - b p), p = (a / b + c) / 2).
An exact fit leaves no uncertainty, so every choice gives that price and knowing the curve
is worth nothing. Noisy demand is compared with the library called on the same stored fit.
"""

from __future__ import annotations

import datetime as dt

import numpy as np
import pytest
from fastapi.testclient import TestClient

from models import History, ModelSpec, fit_demand, optimal_price

WEEKS = [(dt.date(2025, 1, 6) + dt.timedelta(weeks=w)).isoformat() for w in range(40)]
PRICES = [round(8.0 + 8.0 * ((7 * i) % 40) / 39, 4) for i in range(40)]


def _product(client: TestClient, headers: dict[str, str], sku: str, units: list[float]) -> dict:
    product = {"name": sku, "unit_cost": 4.0, "current_price": 14.0, "currency": "EUR"}
    put = client.put(f"/v1/products/{sku}", json=product, headers=headers)
    assert put.status_code in (200, 201), put.text
    rows = [
        {"period": w, "price": p, "units": q} for w, p, q in zip(WEEKS, PRICES, units, strict=True)
    ]
    sent = client.post(
        f"/v1/products/{sku}/observations", json={"observations": rows}, headers=headers
    )
    assert sent.status_code == 200, sent.text
    fit = client.post(
        f"/v1/products/{sku}/fits", json={"spec": {"form": "linear"}}, headers=headers
    ).json()
    assert fit["status"] == "active", fit
    return fit


def _price(client: TestClient, headers: dict[str, str], sku: str, **body: object) -> dict:
    answer = client.post(f"/v1/products/{sku}/optimal-price", json=body, headers=headers)
    assert answer.status_code == 200, answer.text
    return answer.json()


@pytest.mark.parametrize("decide_by", ["point", "expected", "cautious"])
def test_exact_demand_every_choice_finds_the_closed_form_price(
    client: TestClient, headers: dict[str, str], decide_by: str
) -> None:
    sku = f"DECIDE-EXACT-{decide_by.upper()}"
    _product(client, headers, sku, [2000.0 - 100.0 * p for p in PRICES])
    answer = _price(client, headers, sku, decide_by=decide_by, no_harm_check=True)
    # p* = (a / b + c) / 2 = (20 + 4) / 2 = 12 (closed form), in whole cents.
    assert answer["recommended"]["price"] == pytest.approx(12.0, abs=0.005)
    figures = answer["decision_figures"]
    assert figures["decide_by"] == decide_by
    assert figures["held_current"] is False
    # No uncertainty: nothing to learn, and the move beats 14 in every outcome.
    assert figures["value_of_knowing"] == pytest.approx(0.0, abs=1e-6)
    assert figures["chance_of_gain"] == pytest.approx(1.0)
    # Profit at 12 less profit at 14: 8 * 800 - 10 * 600 = 400 per period.
    assert figures["expected_gain"] == pytest.approx(400.0, rel=1e-6)


def test_the_default_is_calibrated(client: TestClient, headers: dict[str, str]) -> None:
    _product(client, headers, "DECIDE-DEFAULT", [2000.0 - 100.0 * p for p in PRICES])
    default = _price(client, headers, "DECIDE-DEFAULT")
    assert default["decision_figures"]["decide_by"] == "calibrated"
    named = _price(client, headers, "DECIDE-DEFAULT", decide_by="calibrated")
    assert default["recommended"] == named["recommended"]


def test_noisy_demand_answers_as_the_library_on_the_same_fit(
    client: TestClient, headers: dict[str, str]
) -> None:
    rng = np.random.default_rng(3)
    units = [float(2000.0 - 100.0 * p + rng.normal(0.0, 150.0)) for p in PRICES]
    _product(client, headers, "DECIDE-NOISY", units)
    # The same history fitted by the library directly (least squares is deterministic).
    history = History.from_lists("DECIDE-NOISY", WEEKS, PRICES, units)
    local = fit_demand(history, ModelSpec(form="linear"))
    answers = {
        choice: _price(client, headers, "DECIDE-NOISY", decide_by=choice, no_harm_check=False)
        for choice in ("point", "expected", "cautious")
    }
    for choice, answer in answers.items():
        figures = answer["decision_figures"]
        assert figures["decide_by"] == choice
        assert figures["value_of_knowing"] > 0.0
        library = optimal_price(local, unit_cost=4.0, current_price=14.0, decide_by=choice)
        assert answer["recommended"]["price"] == pytest.approx(library.recommended.price, abs=0.005)
        assert library.decision_figures is not None
        assert figures["value_of_knowing"] == pytest.approx(
            library.decision_figures.value_of_knowing, rel=1e-6
        )
    # Linear demand: mean units are linear in the coefficients, so the expected-profit
    # price is the point price (linearity of expectation); the cautious one differs.
    assert answers["expected"]["recommended"]["price"] == pytest.approx(
        answers["point"]["recommended"]["price"], abs=0.005
    )
    assert answers["cautious"]["recommended"]["price"] != answers["point"]["recommended"]["price"]


def test_unknown_choice_and_non_boolean_check_are_refused(
    client: TestClient, headers: dict[str, str]
) -> None:
    _product(client, headers, "DECIDE-BAD", [2000.0 - 100.0 * p for p in PRICES])
    for body in ({"decide_by": "best"}, {"decide_by": "Point"}, {"no_harm_check": 1}):
        answer = client.post("/v1/products/DECIDE-BAD/optimal-price", json=body, headers=headers)
        assert answer.status_code == 422, answer.text
        assert answer.headers["content-type"].startswith("application/problem+json")


def test_expected_without_a_price_limit_is_refused_with_the_reason(
    client: TestClient, headers: dict[str, str]
) -> None:
    rng = np.random.default_rng(5)
    units = [float(2000.0 - 100.0 * p + rng.normal(0.0, 150.0)) for p in PRICES]
    _product(client, headers, "DECIDE-OPEN", units)
    body = {"decide_by": "expected", "constraints": {"allow_extrapolation": True}}
    answer = client.post("/v1/products/DECIDE-OPEN/optimal-price", json=body, headers=headers)
    # The mean of a normal floored at zero grows linearly in the price when the slope
    # may be positive: no finite optimum without an upper limit (see the library test).
    assert answer.status_code == 422, answer.text
    assert "max_price" in answer.text
    cautious = _price(
        client,
        headers,
        "DECIDE-OPEN",
        decide_by="cautious",
        **{"constraints": {"allow_extrapolation": True}},
    )
    assert cautious["decision_figures"]["decide_by"] == "cautious"
