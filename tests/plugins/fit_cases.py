"""Fitting cases: a clean weekly history with a known demand curve, and the spec for it.

``clean_history`` draws a log-log demand (own price, rival index, promotions) with small
noise, so a fit of ``SPEC`` on it carries no warning; tests of the warnings and of the
batch path change one thing in it at a time.
"""

from __future__ import annotations

import numpy as np

from models import History, ModelSpec

CLEAN_PERIODS = 104


def _periods(n: int) -> np.ndarray:
    return np.arange(np.datetime64("2023-01-02"), np.datetime64("2023-01-02") + 7 * n, 7)


def clean_history(seed: int = 0, n: int = CLEAN_PERIODS, price_coef: float = -1.8) -> History:
    rng = np.random.default_rng(seed)
    price = rng.uniform(3.0, 6.0, n)
    rival = rng.uniform(0.8, 1.2, n)
    promo = (np.arange(n) % 7 == 3).astype(float)
    cost = price * 0.5 * np.exp(rng.normal(0, 0.05, n))
    units = np.exp(
        5.0 + price_coef * np.log(price) + 0.7 * np.log(rival) + 0.2 * promo + rng.normal(0, 0.1, n)
    )
    return History(
        sku=f"TEA-{seed}",
        periods=_periods(n),
        price=price,
        units=units,
        unit_cost=cost,
        in_stock=np.ones(n, dtype=bool),
        covariates={"rival": rival, "promo": promo, "noise": rng.normal(size=n) + 10.0},
    )


SPEC = ModelSpec(form="log-log", covariates=("rival", "promo"), log_covariates=("rival",))
