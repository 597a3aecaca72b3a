"""Price tests: which prices to charge for a while so that the own-price effect can be told
apart from noise, what that is expected to teach, and what it is expected to cost.

The design is deliberately simple: over ``n_periods`` periods the price alternates between
``centre * (1 + step)`` and ``centre * (1 - step)`` (kept within the bounds), starting high.
Alternation balances the two prices over any even stretch, so the test's prices are nearly
uncorrelated with slow drivers (season, trend, rival prices) and add variation to the own
price only.

The expected narrowing follows from the least-squares variance of the coefficients,
``Cov(b) = s^2 (X'X)^-1``. The fit's covariance gives back ``X'X = s^2 Cov^-1`` (``X'WX`` for
``poisson``, the information its errors imply with robust errors); the test periods add their
design rows ``Z`` (the planned own price; covariates as given, other drivers at the fit's
default values, the latest fitted period's with events off; for ``poisson`` weighted by the
expected units), and the fitted
periods the spec's data window will drop to make room for them are taken off in proportion
(``k``, the share kept: the window keeps the latest periods, so the test's stay in). So

    se_after = s * sqrt([(k X'X + Z'Z)^-1]_bb),  narrowing = se_after / se_now,

given the same residual variance (with ``hc3`` errors, divided by ``1 - h`` for the test
rows' mean leverage ``h``, which those errors inflate): the factor by which the own-price
interval is expected to narrow. Alternation keeps the test's prices nearly uncorrelated
with slow drivers (season, trend, rival prices), so the new variation goes to the own price.

What the test costs comes from the fitted curve, anchored at the units expected at the
centre price: ``q(p) = q(c) * exp(b * (x(p) - x(c)))`` for the log-response forms and
``poisson``, ``q(p) = q(c) + b * (p - c)`` for ``linear``. The profit given up is the sum over
the test periods of the profit at the centre price less the profit at the test price (revenue
when no unit cost is known). Its upper figure takes the own-price coefficient at the
``upper_level`` quantile of cost over draws from its estimated normal distribution.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Final

import numpy as np
from scipy import stats

from models._typing import FloatArray
from models.errors import PricingInputError
from models.predict import predict
from models.result import DemandFit

LOG_PRICE_FORMS: Final = ("log-log", "poisson")
UPPER_LEVEL: Final = 0.95
"""Quantile of the profit given up that a plan states as its upper figure."""
COST_DRAWS: Final = 2000


@dataclass(frozen=True)
class PriceTestPlan:
    """A price test for one product: the prices, what they should teach and cost.

    ``narrowing`` is ``expected_std_error / std_error`` (below 1: a narrower interval).
    Elasticities are at the centre price (for ``linear`` with the units expected there).
    The money figures sum over the test periods; ``profit_given_up`` is None without a
    unit cost.
    """

    centre_price: float
    low_price: float
    high_price: float
    prices: tuple[float, ...]
    expected_units: tuple[float, ...]
    std_error: float
    expected_std_error: float
    narrowing: float
    elasticity: float
    elasticity_interval: tuple[float, float]
    expected_elasticity_interval: tuple[float, float]
    level: float
    units_at_centre: float
    revenue_given_up: float
    profit_given_up: float | None
    profit_given_up_upper: float | None
    upper_level: float


def plan_price_test(
    fit: DemandFit,
    *,
    centre_price: float,
    n_periods: int = 12,
    step: float = 0.1,
    min_price: float | None = None,
    max_price: float | None = None,
    unit_cost: float | None = None,
    covariates: Mapping[str, float] | None = None,
    level: float = 0.95,
    seed: int = 0,
) -> PriceTestPlan:
    """Plan a price test around ``centre_price`` (see the module's description).

    Raises
    ------
    PricingInputError
        Bad arguments, or bounds that leave the two test prices equal.

    Examples
    --------
    >>> import models
    >>> product = models.generate_catalogue(7).product("TEA-009")  # a price that barely moved
    >>> spec = models.ModelSpec(covariates=models.COVARIATES, log_covariates=models.LOG_COVARIATES)
    >>> fit = models.fit_demand(product.history, spec)
    >>> plan = plan_price_test(fit, centre_price=product.current_price, unit_cost=product.unit_cost)
    >>> plan.prices[:4] == (plan.high_price, plan.low_price, plan.high_price, plan.low_price)
    True
    >>> plan.narrowing < 0.2
    True
    """
    if n_periods < 2:
        raise PricingInputError("a price test needs at least 2 periods")
    if not 0 < step < 1:
        raise PricingInputError("step must lie strictly between 0 and 1")
    if not centre_price > 0:
        raise PricingInputError("the centre price must be positive")
    if not 0 < level < 1:
        raise PricingInputError("level must lie strictly between 0 and 1")
    low = centre_price * (1 - step)
    high = centre_price * (1 + step)
    if min_price is not None:
        low, high = max(low, min_price), max(high, min_price)
    if max_price is not None:
        low, high = min(low, max_price), min(high, max_price)
    if not high > low:
        raise PricingInputError(
            f"the price bounds leave no room for a test around {centre_price:g}: "
            f"both test prices would be {high:g}"
        )
    prices = np.array([high if t % 2 == 0 else low for t in range(n_periods)])

    own = fit.own_price
    coef, se = own.estimate, own.std_error
    units_at_centre = float(
        predict(fit, price=centre_price, covariates=covariates or None).expected_units
    )
    units = _units(fit.form, coef, prices, centre_price, units_at_centre)

    info_now = _information(fit)
    rows = _test_rows(fit, prices, covariates or {})
    weights = units if fit.form == "poisson" else np.ones_like(units)
    info_after = _kept_share(fit, n_periods) * info_now + rows.T @ (rows * weights[:, None])
    b = [t.kind for t in fit.terms].index("own_price")
    inverse = np.linalg.inv(info_after)
    var_after = fit.quality.sigma**2 * float(inverse[b, b])
    if fit.spec.standard_errors == "hc3":
        # HC3 divides each squared residual by (1 - h)^2 while E[e^2] = s^2 (1 - h): the
        # test rows' share of the variance grows by 1 / (1 - h) at their leverage h.
        leverage = np.einsum("ij,jk,ik->i", rows, inverse, rows) * weights
        var_after /= 1.0 - float(np.mean(np.minimum(leverage, 0.5)))
    narrowing = float(np.sqrt(var_after) / se) if se > 0 else 1.0

    quantile = float(
        stats.t.ppf(0.5 + level / 2, fit.df_resid) if fit.use_t else stats.norm.ppf(0.5 + level / 2)
    )
    to_elasticity = _elasticity_scale(fit.form, centre_price, units_at_centre)
    half_now = quantile * se * abs(to_elasticity)
    elasticity = coef * to_elasticity

    revenue_given_up = float(centre_price * units_at_centre * n_periods - np.sum(prices * units))
    profit = upper = None
    if unit_cost is not None:
        profit = _given_up(fit.form, coef, prices, centre_price, units_at_centre, unit_cost)
        draws = np.random.default_rng(seed).normal(coef, se, COST_DRAWS)
        costs = [
            _given_up(fit.form, b, prices, centre_price, units_at_centre, unit_cost) for b in draws
        ]
        upper = max(float(np.quantile(costs, UPPER_LEVEL)), profit)
    return PriceTestPlan(
        centre_price=float(centre_price),
        low_price=float(low),
        high_price=float(high),
        prices=tuple(float(p) for p in prices),
        expected_units=tuple(float(q) for q in units),
        std_error=float(se),
        expected_std_error=float(se * narrowing),
        narrowing=narrowing,
        elasticity=float(elasticity),
        elasticity_interval=(elasticity - half_now, elasticity + half_now),
        expected_elasticity_interval=(
            elasticity - half_now * narrowing,
            elasticity + half_now * narrowing,
        ),
        level=level,
        units_at_centre=units_at_centre,
        revenue_given_up=revenue_given_up,
        profit_given_up=profit,
        profit_given_up_upper=upper,
        upper_level=UPPER_LEVEL,
    )


def _units(
    form: str, coef: float, prices: np.ndarray, centre: float, q_centre: float
) -> np.ndarray:
    """Units the fitted curve expects at ``prices``, anchored at the centre price."""
    if form == "linear":
        return np.maximum(q_centre + coef * (prices - centre), 0.0)
    shift = np.log(prices / centre) if form in LOG_PRICE_FORMS else prices - centre
    return np.asarray(q_centre * np.exp(coef * shift), dtype=np.float64)


def _given_up(
    form: str, coef: float, prices: np.ndarray, centre: float, q_centre: float, cost: float
) -> float:
    units = _units(form, coef, prices, centre, q_centre)
    return float((centre - cost) * q_centre * len(prices) - np.sum((prices - cost) * units))


def _elasticity_scale(form: str, price: float, units: float) -> float:
    """Elasticity per unit of the own-price coefficient at one point."""
    if form in LOG_PRICE_FORMS:
        return 1.0
    if form == "semi-log":
        return price
    return price / units if units > 0 else float("nan")


def _kept_share(fit: DemandFit, n_test: int) -> float:
    """The share of the fitted periods still inside the spec's data window once the test's
    periods are added (the window keeps the latest ``window_periods``)."""
    window = fit.spec.window_periods
    n_window = fit.window.n_window
    if not window or n_window <= 0:
        return 1.0
    dropped = max(0, n_window + n_test - window)
    return max(n_window - dropped, 0) / n_window


def _information(fit: DemandFit) -> FloatArray:
    """``X'X`` of the fit (``X'WX`` for ``poisson``) recovered from its covariance,
    ``s^2 (X'X)^-1``; with robust errors, the information those errors imply."""
    return np.asarray(fit.quality.sigma**2 * np.linalg.inv(fit.cov), dtype=np.float64)


def _test_rows(fit: DemandFit, prices: FloatArray, covariates: Mapping[str, float]) -> FloatArray:
    """The design rows of the test periods: the planned own price; covariates as given,
    else (like every other driver) at the fit's default values (the latest fitted period's,
    events off); seasonal and trend terms at the latest fitted period's."""
    values = {**fit.default_values, **covariates}
    rows = np.empty((len(prices), len(fit.terms)))
    for j, term in enumerate(fit.terms):
        if term.kind == "intercept":
            rows[:, j] = 1.0
        elif term.kind == "own_price":
            rows[:, j] = np.log(prices) if term.transform == "log" else prices
        elif term.source is not None:
            rows[:, j] = term.column(values[term.source])
        else:
            rows[:, j] = fit.regressor_latest[term.name]
    return rows
