"""Expected units, prediction interval, revenue and profit at given prices."""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np

from models.elasticity import critical_value, design_row
from models.result import DemandFit, clean
from models.spec import LOG_RESPONSE_FORMS


@dataclass(frozen=True)
class Prediction:
    """Demand at one price point.

    ``expected_units`` is the mean (log forms: ``exp(xb)`` times the smearing factor);
    the interval covers a single period's units with probability ``level``.
    ``profit`` is None without a unit cost.
    """

    sku: str
    form: str
    price: float
    expected_units: float
    interval_low: float
    interval_high: float
    level: float
    revenue: float
    profit: float | None
    unit_cost: float | None
    point: dict[str, float]

    def to_dict(self) -> dict[str, Any]:
        return dict(clean(vars(self)))


def predict(
    fit: DemandFit,
    *,
    price: float,
    covariates: Mapping[str, float] | None = None,
    cross_prices: Mapping[str, float] | None = None,
    unit_cost: float | None = None,
    level: float = 0.95,
) -> Prediction:
    """Expected units with a prediction interval, revenue and profit.

    Variables not given take :attr:`DemandFit.default_values` (the latest fitted period's
    values, with events such as a promotion or a holiday off); seasonal and trend terms
    take the latest fitted period's.

    Parameters
    ----------
    fit : DemandFit
    price : float
        Own price.
    covariates, cross_prices : mapping, optional
        Values overriding the latest ones.
    unit_cost : float, optional
        For profit ``(price - unit_cost) * expected_units``.
    level : float
        Coverage of the prediction interval.

    Intervals: linear ``yhat +- t * sqrt(s^2 + a'Va)`` floored at zero; log forms
    ``exp(xb +- t * sqrt(s^2 + a'Va))`` (quantiles survive the monotone transform,
    so no smearing there); poisson a normal approximation with variance
    ``phi * mu + mu^2 a'Va`` (``phi`` the Pearson dispersion).

    Examples
    --------
    >>> import numpy as np
    >>> from models import History, ModelSpec, fit_demand
    >>> rng = np.random.default_rng(2)
    >>> price = rng.uniform(3, 6, 52)
    >>> periods = np.arange("2024-01-01", 52 * 7, 7, dtype="datetime64[D]")[:52]
    >>> units = 200 - 25 * price + rng.normal(0, 2, 52)
    >>> h = History("TEA-3", periods, price, units, np.full(52, np.nan), np.ones(52, bool))
    >>> p = predict(fit_demand(h, ModelSpec(form="linear")), price=4.0, unit_cost=2.0)
    >>> round(p.expected_units), p.interval_low < p.expected_units < p.interval_high
    (100, True)
    """
    variables = fit.default_values
    overrides = {"price": float(price), **(covariates or {}), **(cross_prices or {})}
    unknown = set(overrides) - set(variables)
    if unknown:
        raise ValueError(f"unknown variables {sorted(unknown)}; known: {sorted(variables)}")
    variables.update({k: float(v) for k, v in overrides.items()})
    a = design_row(fit, variables, fit.regressor_latest)
    mean_lp = float(a @ fit.params)
    param_var = float(a @ fit.cov @ a)
    crit = critical_value(fit, level)
    sigma2 = fit.quality.sigma**2
    if fit.form == "linear":
        units = mean_lp
        half = crit * np.sqrt(sigma2 + param_var)
        low, high = max(units - half, 0.0), units + half
    elif fit.form in LOG_RESPONSE_FORMS:
        units = float(np.exp(mean_lp) * (fit.smearing or 1.0))
        half = crit * np.sqrt(sigma2 + param_var)
        low, high = float(np.exp(mean_lp - half)), float(np.exp(mean_lp + half))
    else:
        units = float(np.exp(mean_lp))
        half = crit * np.sqrt(sigma2 * units + units**2 * param_var)
        low, high = max(units - half, 0.0), units + half
    return Prediction(
        sku=fit.sku,
        form=fit.form,
        price=float(price),
        expected_units=units,
        interval_low=float(low),
        interval_high=float(high),
        level=level,
        revenue=float(price) * units,
        profit=None if unit_cost is None else (float(price) - float(unit_cost)) * units,
        unit_cost=None if unit_cost is None else float(unit_cost),
        point=variables,
    )
