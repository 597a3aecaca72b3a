"""Helpers for the pricing tests: exact demand data and a brute-force evaluator.

The evaluator rebuilds expected units from a fit's coefficient table on its own (it
shares no code with ``models.pricing``), so brute-force searches check the optimiser
against an independent computation of the same demand curve.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping

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

    ``values`` overrides the latest variable values (arrays broadcast with ``prices``).
    """
    point: dict[str, np.ndarray | float] = {**fit.variable_latest, **(values or {})}
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
