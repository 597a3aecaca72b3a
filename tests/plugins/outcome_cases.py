"""Outcomes for the watch: a product fitted and priced, then periods sent after the
recommendation from the invented shop's true demand (tests/service/estimation and ui)."""

from __future__ import annotations

import datetime as dt

import numpy as np
from fastapi.testclient import TestClient

import models

SPEC = {
    "form": "log-log",
    "covariates": ["rival_price", "promo", "ad_spend", "holiday"],
    "log_covariates": ["rival_price", "ad_spend"],
}
SKU = "TEA-021"


def send_outcomes(
    client: TestClient, headers: dict[str, str], n: int, *, fall_after: int | None, seed: int
) -> list[str]:
    """``n`` weekly periods from next Monday, drawn from the product's true demand (the
    invented shop's), in ordinary weeks; after ``fall_after`` periods demand falls by 40%."""
    product = models.generate_catalogue(7).product(SKU)
    truth = product.truth
    rng = np.random.default_rng(seed)
    today = dt.datetime.now(dt.UTC).date()
    start = today + dt.timedelta(days=7 - today.weekday())
    prices = product.current_price * np.where(np.arange(n) % 2 == 0, 1.03, 0.97)
    drivers = {"rival_price": 1.0, "promo": 0.0, "ad_spend": 200.0, "holiday": 0.0}
    eta = truth.linear_predictor(prices, covariates=drivers)
    units = np.exp(eta + truth.noise_sd * rng.standard_normal(n))
    if fall_after is not None:
        units[fall_after:] *= 0.6
    periods = [(start + dt.timedelta(weeks=i)).isoformat() for i in range(n)]
    rows = [
        {
            "period": periods[i],
            "price": round(float(prices[i]), 2),
            "units": round(float(units[i]), 3),
            "in_stock": True,
            "covariates": drivers,
        }
        for i in range(n)
    ]
    sent = client.post(
        f"/v1/products/{SKU}/observations", json={"observations": rows}, headers=headers
    )
    assert sent.status_code in (200, 201), sent.json()
    return periods


def fit_and_recommend(client: TestClient, headers: dict[str, str]) -> None:
    fit = client.post(f"/v1/products/{SKU}/fits", json={"spec": SPEC}, headers=headers)
    assert fit.json()["status"] == "active", fit.json()
    # A stored recommendation starts the watch ("store": true where a what-if is the default).
    priced = client.post(f"/v1/products/{SKU}/optimal-price", json={"store": True}, headers=headers)
    if priced.status_code == 422 and "store" in str(priced.json()):
        priced = client.post(f"/v1/products/{SKU}/optimal-price", json={}, headers=headers)
    assert priced.status_code in (200, 201) and priced.json()["id"] is not None, priced.json()
