"""Pricing cases: exact demand data, known families, and a brute-force evaluator.

The evaluator rebuilds expected units from a fit's coefficient table on its own (it
shares no code with ``models.pricing``), so brute-force searches check the optimiser
against an independent computation of the same demand curve. The families
(``two_linear``, ``two_power``, ``three_mixed``, with unit costs ``COSTS``) are fitted on
exact data from known cross-price demand curves, once per session.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from functools import cache

import numpy as np

from models import DemandFit, History, ModelSpec, fit_demand, predict

N_PERIODS = 40


def periods(n: int = N_PERIODS) -> np.ndarray:
    return np.arange(np.datetime64("2024-01-01"), np.datetime64("2024-01-01") + 7 * n, 7)


def exact_fit(
    sku: str,
    form: str,
    prices: np.ndarray,
    units: np.ndarray,
    *,
    cross_prices: Mapping[str, np.ndarray] | None = None,
    standard_errors: str = "hc3",
) -> DemandFit:
    """Fit noise-free data generated from a known demand curve."""
    n = prices.shape[0]
    history = History(
        sku,
        periods(n),
        np.asarray(prices, dtype=float),
        np.asarray(units, dtype=float),
        np.full(n, np.nan),
        np.ones(n, dtype=bool),
        cross_prices={k: np.asarray(v, dtype=float) for k, v in (cross_prices or {}).items()},
    )
    spec = ModelSpec(
        form=form, cross_prices=tuple(cross_prices or ()), standard_errors=standard_errors
    )
    return fit_demand(history, spec)


def expected_units(
    fit: DemandFit,
    prices: np.ndarray,
    values: Mapping[str, np.ndarray | float] | None = None,
) -> np.ndarray:
    """Expected units at own prices ``prices`` (any shape) from the coefficient table.

    ``values`` overrides the defaults: the latest variable values with events (covariates
    only ever 0 or 1) off (arrays broadcast with ``prices``).
    """
    events_off = dict.fromkeys(fit.variable_events, 0.0)
    point: dict[str, np.ndarray | float] = {**fit.variable_latest, **events_off, **(values or {})}
    prices = np.asarray(prices, dtype=float)
    eta = np.zeros(prices.shape)
    for term, row in zip(fit.terms, fit.coefficients, strict=True):
        if term.kind == "intercept":
            x: np.ndarray | float = 1.0
        elif term.kind == "own_price":
            x = prices
        elif term.source is not None:
            x = np.asarray(point[term.source], dtype=float)
        else:
            x = fit.regressor_latest[term.name]
        if term.transform == "log":
            x = np.log(x)
        eta = eta + row.estimate * x
    if fit.form == "linear":
        return np.maximum(eta, 0.0)
    if fit.form in ("log-log", "semi-log"):
        return np.exp(eta) * (fit.smearing or 1.0)
    return np.exp(eta)


def check_against_predict(fit: DemandFit, prices: list[float]) -> None:
    """The evaluator agrees with ``models.predict`` (a third, scalar code path)."""
    for p in prices:
        assert np.isclose(expected_units(fit, np.array(p)), predict(fit, price=p).expected_units)


def brute_force(
    objective: Callable[[np.ndarray], np.ndarray],
    allowed: Callable[[np.ndarray], np.ndarray],
    low: float,
    high: float,
    n: int = 400_001,
) -> tuple[float, float, float]:
    """Best allowed point of a fine grid: (price, objective value, grid step)."""
    grid = np.linspace(low, high, n)
    values = np.where(allowed(grid), objective(grid), -np.inf)
    k = int(np.argmax(values))
    return float(grid[k]), float(values[k]), float(grid[1] - grid[0])


def with_params(fit: DemandFit, params: np.ndarray) -> DemandFit:
    """The same fit with other coefficient estimates (e.g. one coefficient draw)."""
    data = fit.to_dict()
    for row, value in zip(data["coefficients"], params, strict=True):
        row["estimate"] = float(value)
    return DemandFit.from_dict(data)


FAMILY_PERIODS = 60


def family_prices(seed: int, low: float, high: float) -> np.ndarray:
    return np.random.default_rng(seed).uniform(low, high, FAMILY_PERIODS)


@cache
def two_linear() -> dict[str, DemandFit]:
    """Linear substitutes with a concave joint profit."""
    pa, pb = family_prices(1, 8.0, 14.0), family_prices(2, 9.0, 15.0)
    qa = 200.0 - 12.0 * pa + 4.0 * pb
    qb = 180.0 - 10.0 * pb + 5.0 * pa
    return {
        "A": exact_fit("A", "linear", pa, qa, cross_prices={"B": pb}),
        "B": exact_fit("B", "linear", pb, qb, cross_prices={"A": pa}),
    }


@cache
def two_power() -> dict[str, DemandFit]:
    """Constant-elasticity substitutes (log-log with cross terms)."""
    pa, pb = family_prices(3, 8.0, 14.0), family_prices(4, 9.0, 16.0)
    qa = np.exp(7.0 - 2.5 * np.log(pa) + 0.6 * np.log(pb))
    qb = np.exp(7.5 - 3.0 * np.log(pb) + 0.4 * np.log(pa))
    return {
        "A": exact_fit("A", "log-log", pa, qa, cross_prices={"B": pb}),
        "B": exact_fit("B", "log-log", pb, qb, cross_prices={"A": pa}),
    }


@cache
def three_mixed() -> dict[str, DemandFit]:
    """Three forms, substitutes and one complement."""
    pa, pb = family_prices(5, 6.0, 10.0), family_prices(6, 8.0, 12.0)
    pc = family_prices(7, 10.0, 16.0)
    qa = np.exp(6.5 - 2.2 * np.log(pa) + 0.5 * np.log(pb))
    qb = np.exp(4.5 - 0.3 * pb + 0.05 * pa - 0.04 * pc)
    qc = 150.0 - 7.0 * pc + 2.0 * pb
    return {
        "A": exact_fit("A", "log-log", pa, qa, cross_prices={"B": pb}),
        "B": exact_fit("B", "semi-log", pb, qb, cross_prices={"A": pa, "C": pc}),
        "C": exact_fit("C", "linear", pc, qc, cross_prices={"B": pb}),
    }


COSTS = {"A": 4.0, "B": 5.0, "C": 6.0}
