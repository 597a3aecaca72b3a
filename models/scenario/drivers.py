"""The calendar, the covariates and the price and cost paths of the invented shop."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from models._typing import DateArray, FloatArray

_PROMO_DEPTHS = np.array([0.10, 0.15, 0.20, 0.25])


def weekly_periods(start: str, n_periods: int) -> DateArray:
    """Monday start dates of ``n_periods`` consecutive weeks.

    Examples
    --------
    >>> weekly_periods("2024-01-01", 2)
    array(['2024-01-01', '2024-01-08'], dtype='datetime64[D]')
    """
    first = np.datetime64(start, "D")
    # 1970-01-01 was a Thursday, so Mondays are the days d with (d + 3) % 7 == 0.
    if (int(first.astype(np.int64)) + 3) % 7 != 0:
        raise ValueError(f"start must be a Monday, got {start}")
    if n_periods < 1:
        raise ValueError("n_periods must be positive")
    return first + 7 * np.arange(n_periods)


def holiday_flags(periods: DateArray) -> FloatArray:
    """1.0 for gift weeks (Monday on or after 14 December; Monday 6-12 May), else 0.0.

    Examples
    --------
    >>> import numpy as np
    >>> holiday_flags(np.array(["2024-12-16", "2024-05-06", "2024-06-03"], "datetime64[D]"))
    array([1., 1., 0.])
    """
    months = periods.astype("datetime64[M]")
    day = (periods - months.astype("datetime64[D]")).astype(np.int64) + 1
    month = months.astype(np.int64) % 12 + 1
    late_december = (month == 12) & (day >= 14)
    spring_gift_week = (month == 5) & (day >= 6) & (day <= 12)
    flags: FloatArray = np.asarray(late_december | spring_gift_week, dtype=np.float64)
    return flags


# ----------------------------------------------------------------------------- drivers


def _ar1(rng: np.random.Generator, n: int, *, phi: float, sd: float) -> FloatArray:
    shocks = rng.normal(0.0, sd, n)
    # Stationary start, then x_t = phi x_{t-1} + e_t, written as a convolution.
    shocks[0] /= np.sqrt(1.0 - phi**2)
    weights = phi ** np.arange(n)
    return np.asarray(np.convolve(shocks, weights)[:n], dtype=np.float64)


def rival_index(rng: np.random.Generator, n: int) -> FloatArray:
    """The shop-wide rival price index: around 1.0, a slow drift plus AR(1) weekly noise."""
    drift = np.linspace(0.0, rng.uniform(-0.05, 0.08), n)
    log_index = drift + _ar1(rng, n, phi=0.8, sd=0.025)
    return np.asarray(np.round(np.exp(log_index), 4), dtype=np.float64)


def ad_spend(rng: np.random.Generator, n: int, holiday: FloatArray, *, budget: float) -> FloatArray:
    """Weekly ad spend: the budget, campaign bursts, doubled in gift weeks, lognormal noise."""
    campaign = rng.random(n) < 0.12
    burst = np.where(campaign, rng.uniform(1.8, 3.0, n), 1.0) * (1.0 + holiday)
    return np.round(budget * burst * np.exp(rng.normal(0.0, 0.25, n)), 2)


def promo_weeks(rng: np.random.Generator, n: int, rate: float, *, minimum: int = 0) -> FloatArray:
    """Independent promotion weeks; ``minimum`` keeps the promo column from being all zero."""
    promo = (rng.random(n) < rate).astype(np.float64)
    missing = minimum - int(promo.sum())
    if missing > 0:
        promo[rng.choice(np.flatnonzero(promo == 0), missing, replace=False)] = 1.0
    return promo


def _steps(
    rng: np.random.Generator, n: int, *, expected: float, mean: float, sd: float
) -> FloatArray:
    """Piecewise-constant log path: a Poisson number of jumps at random weeks."""
    path = np.zeros(n)
    count = int(rng.poisson(expected))
    if n > 8 and count:
        weeks = rng.integers(4, n - 4, count)
        sizes = rng.normal(mean, sd, count)
        for week, size in zip(weeks, sizes, strict=True):
            path[week:] += size
    return path


def log_cost_deviation(rng: np.random.Generator, n: int) -> FloatArray:
    """Log unit cost relative to its start: slow drift plus occasional supplier steps."""
    walk = np.cumsum(rng.normal(0.0, 0.004, n))
    return np.clip(walk + _steps(rng, n, expected=1.0, mean=0.02, sd=0.06), -0.2, 0.2)


def volatile_log_cost(rng: np.random.Generator, n: int) -> FloatArray:
    """Harvest-driven cost: five supplier steps that alternate up and down."""
    path = np.cumsum(rng.normal(0.0, 0.002, n))
    size = rng.uniform(0.12, 0.16)
    for k, sign in enumerate((1.0, -1.0, 1.0, -1.0, 1.0)):
        path[(k + 1) * n // 6 :] += sign * size
    return path


@dataclass(frozen=True)
class PricePaths:
    """Shelf price (before rounding), regular (list) price and unit cost per period."""

    shelf: FloatArray
    regular: FloatArray
    cost: FloatArray


def price_paths(
    rng: np.random.Generator,
    n: int,
    *,
    base_price: float,
    cost_share: float,
    promo: FloatArray,
    pass_through: float,
    list_changes: float,
    price_noise: float,
    log_cost: FloatArray,
    discount_promos: bool = True,
) -> PricePaths:
    """Cost, list and shelf prices: list follows cost, promotions and vouchers cut the shelf."""
    cost = np.round(base_price * cost_share * np.exp(log_cost), 2)
    log_list = _steps(rng, n, expected=list_changes, mean=0.02, sd=0.06)
    # Bounded so that list prices stay within about 20% of the base price.
    log_regular = np.clip(pass_through * log_cost + log_list, -0.18, 0.18)
    regular = np.round(base_price * np.exp(log_regular), 2)
    depth = rng.choice(_PROMO_DEPTHS, n) * promo if discount_promos else np.zeros(n)
    voucher = np.exp(rng.normal(0.0, price_noise, n)) if price_noise > 0 else np.ones(n)
    shelf = regular * (1.0 - depth) * voucher
    return PricePaths(shelf=shelf, regular=regular, cost=cost)
