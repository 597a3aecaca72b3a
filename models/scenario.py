"""A seeded, invented online tea shop with known true demand parameters.

The scenario serves the demo and the recover-the-truth tests: every number is drawn
from a documented data-generating process, and the true parameters are returned next
to the data so that an estimate can be compared with the value it should find.

Data-generating process
-----------------------
Each product has a linear predictor

    eta = intercept + price_coef * f(price) + sum_c coef_c * g_c(x_c) + sum_k cross_k * f(price_k)

where ``f`` is ``ln`` for the ``log-log`` and ``poisson`` forms and the identity for
``semi-log`` and ``linear``; ``g_c`` is ``ln`` for the covariates named in
``TrueDemand.log_covariates`` (``rival_price`` and ``ad_spend``) and the identity for the
0/1 flags (``promo``, ``holiday``). Cross prices always enter like the own price.

Demand given the predictor, with ``u`` a standard normal draw per period:

* ``log-log`` and ``semi-log``: ``exp(eta + noise_sd * u)`` (multiplicative lognormal noise;
  ``exp(eta)`` is the median, ``exp(eta + noise_sd**2 / 2)`` the mean);
* ``linear``: ``eta + noise_sd * u`` (additive normal noise in units), floored at zero;
  the parameters used here keep the mean many noise standard deviations above zero,
  so the floor does not bind in practice;
* ``poisson``: a Poisson count with mean ``exp(eta)`` (``noise_sd`` is 0).

Covariates
----------
``rival_price``
    A shop-wide index of rival shelf prices, around 1.0 with a slow drift and weekly
    noise; enters in logs, so its coefficient is an elasticity (positive).
``promo``
    1 in a product's promotion weeks. A promotion lowers the shelf price by 10-25% and
    also lifts demand beyond the price cut (newsletter feature); the flag's coefficient
    is that extra lift (positive; log points for the log forms, units for ``linear``).
``ad_spend``
    Money spent per week on advertising the product's family (always > 0: an always-on
    budget plus campaign bursts); enters as ``ln(ad_spend)``, so its coefficient is an
    elasticity (positive, small).
``holiday``
    1 in gift weeks: weeks starting on a Monday from 14 December onwards and the spring
    gift week (the week starting on the Monday between 6 and 12 May); positive lift,
    largest for gift sets.

Prices and costs
----------------
Unit cost drifts slowly (a random walk plus occasional supplier steps) around 40-60% of
the base price. The regular (list) price follows cost with a pass-through between 0.4
and 0.9 in logs and has occasional list-price changes; the shelf price is the regular
price less any promotion discount, times a small voucher-mix noise, rounded to cents.
Cost moves are independent of demand shocks, so unit cost is a valid instrument for
price. Demand is generated from the recorded (rounded) prices and covariates, so a
regression on the recorded data is exactly specified.

The catalogue records whole units: the log and linear forms are rounded to the nearest
integer, with volumes kept high enough (at least 20 a week at the base point) that the
rounding does not visibly bias the estimates. Stockout weeks are supply-driven (late
deliveries), drawn independently of demand; in such weeks the shop sells only a random
15-85% share of demand, so excluding them leaves the estimates unbiased.
:func:`simulate_product` records unrounded units unless asked (Poisson counts are whole).

The catalogue
-------------
Products are spread evenly over five families and numbered family by family; the layout
does not depend on the seed. Forms follow a fixed cycle: with 40 products, 26 ``log-log``,
5 ``semi-log``, 4 ``linear`` and 5 ``poisson``. Ranges the seed draws from (effects at
the base point; the form's own coefficients are derived from them):

* elasticity: -3.5 to -1.2 (``linear``: -2.0 to -1.2; ``semi-log``: -3.0 to -1.2);
* base price 4-40 by family; unit cost 40-60% of it; base units 25-300 a week for the log
  forms (gift sets 20-60, oolongs up to 120), 80-250 for ``linear``, 0.8-3 for the
  low-volume ``poisson`` products, which supply the zero-sale weeks;
* rival-price elasticity 0.3 to 1.2; promotion lift 0.08 to 0.30; ad-spend elasticity
  0.03 to 0.15; holiday lift 0.05 to 0.35 (gift sets 0.5 to 1.0);
* log noise sd 0.10 to 0.25; ``linear`` noise sd 6-12% of base units;
* cross-price elasticities 0.15 to 0.6 (substitutes) for 1-2 siblings each; the matcha
  tin and the matcha whisk are complements of each other (-0.4 to -0.2);
* promotions in 6-14% of weeks (at least three); stockouts in 3-8% of the weeks of about
  a third of the products.

Traps
-----
Three catalogue products are built to fail quality gates; ``TrueDemand.trap`` names them:

``"flat-price"``
    The everyday breakfast tin kept one list price for two years and was never
    discounted (its promotion weeks are newsletter features without a price cut); two
    voucher weeks 2% below list are its only price movement, so the own-price effect is
    not identified (coefficient of variation of price well under 1%).
``"short-history"``
    A newly launched oolong with only the last 8 weeks in its history: too few
    observations for the number of terms.
``"endogenous-price"``
    A limited first-flush green tea whose price the shop raised in weeks when demand ran
    hot: the log price moves by ``endogeneity`` (0.1) times the standardised demand
    shock (log noise sd 0.35, true elasticity -1.5 to -1.2). Ordinary least squares on
    the correctly specified equation gives a wrong-signed, significantly positive
    own-price estimate. Its cost follows five alternating supplier steps of 12-16% with
    full pass-through, so two-stage least squares with ``ln(unit_cost)`` as the
    instrument for ``ln(price)`` has a strong first stage and recovers a negative
    elasticity.

Examples
--------
>>> cat = generate_catalogue(7)
>>> len(cat.products), cat.families[0], cat.periods[0]
(40, 'green', np.datetime64('2024-01-01'))
>>> [p.truth.trap for p in cat.products if p.truth.trap is not None]
['endogenous-price', 'flat-price', 'short-history']
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, replace
from typing import Literal, TypeAlias

import numpy as np

from models._typing import BoolArray, DateArray, FloatArray
from models.history import History

DemandForm: TypeAlias = Literal["log-log", "semi-log", "linear", "poisson"]
NoiseModel: TypeAlias = Literal["lognormal", "normal", "poisson"]
Trap: TypeAlias = Literal["flat-price", "short-history", "endogenous-price"]

COVARIATES: tuple[str, ...] = ("rival_price", "promo", "ad_spend", "holiday")
"""Covariate names recorded for every product, in this order."""
LOG_COVARIATES: tuple[str, ...] = ("rival_price", "ad_spend")
"""Covariates that enter the true demand equation as natural logs."""
FAMILIES: tuple[str, ...] = ("green", "black", "oolong", "herbal", "gift-sets")
CURRENCY = "EUR"
MIN_PRODUCTS = 15
MAX_PRODUCTS = 100
SHORT_HISTORY_PERIODS = 8

_NOISE_BY_FORM: dict[str, NoiseModel] = {
    "log-log": "lognormal",
    "semi-log": "lognormal",
    "linear": "normal",
    "poisson": "poisson",
}
_PROMO_DEPTHS = np.array([0.10, 0.15, 0.20, 0.25])
_STOCKOUT_SHARE_SOLD = (0.15, 0.85)


@dataclass(frozen=True)
class TrueDemand:
    """The true demand equation of one product, in the form's own coefficients.

    Parameters
    ----------
    form : {"log-log", "semi-log", "linear", "poisson"}
        Functional form of the equation (see the module docstring).
    intercept : float
        Constant term of the linear predictor.
    price_coef : float
        Own-price coefficient: the constant elasticity for ``log-log`` and ``poisson``;
        per currency unit on ``ln units`` for ``semi-log``; units per currency unit for
        ``linear``.
    elasticity_at_base : float
        Own-price elasticity at the base point (equals ``price_coef`` for the constant
        elasticity forms).
    covariate_coefs : dict[str, float]
        Coefficient of each covariate in :data:`COVARIATES`.
    log_covariates : tuple[str, ...]
        Covariates entered as natural logs; the others enter as levels.
    cross_price_coefs : dict[str, float]
        Coefficient of each sibling's price, keyed by sibling sku; the price enters like
        the own price (log for ``log-log`` and ``poisson``). Positive means substitutes.
    noise : {"lognormal", "normal", "poisson"}
        The noise model that goes with the form.
    noise_sd : float
        Standard deviation of the log error (lognormal), of units (normal); 0 for Poisson.
    base_price : float
        Own price at the base point.
    base_units : float
        Units at the base point before noise: the median for the log forms, the mean for
        ``linear`` and ``poisson``. The intercept is set so that the base point gives it.
    covariate_reference : dict[str, float]
        Covariate values at the base point (rival index 1, no promotion, no holiday, the
        family's baseline ad budget).
    cross_price_reference : dict[str, float]
        Sibling prices at the base point (their base prices).
    trap : {"flat-price", "short-history", "endogenous-price"} or None
        Which quality gate the product is built to fail, if any.
    endogeneity : float
        Log-price response to a one-standard-deviation demand shock (0: exogenous price).

    Examples
    --------
    >>> truth = simulate_product(1, form="semi-log", elasticity=-2.0, base_price=8.0).truth
    >>> round(truth.price_coef, 3), round(float(truth.own_price_elasticity(8.0)), 3)
    (-0.25, -2.0)
    """

    form: DemandForm
    intercept: float
    price_coef: float
    elasticity_at_base: float
    covariate_coefs: dict[str, float]
    log_covariates: tuple[str, ...]
    cross_price_coefs: dict[str, float]
    noise: NoiseModel
    noise_sd: float
    base_price: float
    base_units: float
    covariate_reference: dict[str, float]
    cross_price_reference: dict[str, float]
    trap: Trap | None = None
    endogeneity: float = 0.0

    @property
    def prices_in_logs(self) -> bool:
        """True when own and cross prices enter the equation as logs."""
        return self.form in ("log-log", "poisson")

    def linear_predictor(
        self,
        price: FloatArray | float,
        *,
        covariates: Mapping[str, FloatArray | float] | None = None,
        cross_prices: Mapping[str, FloatArray | float] | None = None,
    ) -> FloatArray:
        """Evaluate ``eta`` at given prices; missing inputs take their base-point values.

        Examples
        --------
        >>> truth = simulate_product(1).truth
        >>> bool(np.isclose(truth.linear_predictor(truth.base_price), np.log(truth.base_units)))
        True
        """
        covariates = covariates or {}
        cross_prices = cross_prices or {}
        eta = self.intercept + self.price_coef * self._price_term(price)
        for name, coef in self.covariate_coefs.items():
            value = np.asarray(covariates.get(name, self.covariate_reference[name]), np.float64)
            eta = eta + coef * (np.log(value) if name in self.log_covariates else value)
        for sku, coef in self.cross_price_coefs.items():
            sibling_price = cross_prices.get(sku, self.cross_price_reference[sku])
            eta = eta + coef * self._price_term(sibling_price)
        return np.asarray(eta, dtype=np.float64)

    def expected_units(
        self,
        price: FloatArray | float,
        *,
        covariates: Mapping[str, FloatArray | float] | None = None,
        cross_prices: Mapping[str, FloatArray | float] | None = None,
    ) -> FloatArray:
        """True mean demand (uncensored, unrounded; lognormal mean for the log forms).

        For ``linear`` this is the predictor itself, ignoring the floor at zero.

        Examples
        --------
        >>> truth = simulate_product(1, form="poisson", base_units=5.0).truth
        >>> round(float(truth.expected_units(truth.base_price)), 6)
        5.0
        """
        eta = self.linear_predictor(price, covariates=covariates, cross_prices=cross_prices)
        if self.form == "linear":
            return eta
        if self.noise == "lognormal":
            return np.asarray(np.exp(eta + 0.5 * self.noise_sd**2), dtype=np.float64)
        return np.asarray(np.exp(eta), dtype=np.float64)

    def own_price_elasticity(
        self,
        price: FloatArray | float,
        *,
        covariates: Mapping[str, FloatArray | float] | None = None,
        cross_prices: Mapping[str, FloatArray | float] | None = None,
    ) -> FloatArray:
        """Point own-price elasticity of mean demand, ``d ln E[q] / d ln p``.

        Examples
        --------
        >>> truth = simulate_product(1, form="linear", elasticity=-1.5).truth
        >>> round(float(truth.own_price_elasticity(truth.base_price)), 6)
        -1.5
        """
        p = np.asarray(price, dtype=np.float64)
        if self.form in ("log-log", "poisson"):
            return np.asarray(np.full(p.shape, self.price_coef), dtype=np.float64)
        if self.form == "semi-log":
            return np.asarray(self.price_coef * p, dtype=np.float64)
        mean = self.expected_units(p, covariates=covariates, cross_prices=cross_prices)
        return np.asarray(self.price_coef * p / mean, dtype=np.float64)

    def _price_term(self, price: FloatArray | float) -> FloatArray:
        p = np.asarray(price, dtype=np.float64)
        return np.asarray(np.log(p) if self.prices_in_logs else p, dtype=np.float64)


@dataclass(frozen=True, eq=False)
class ScenarioProduct:
    """One invented product: its catalogue entry, its sales history and its true demand.

    Parameters
    ----------
    sku, name, family, currency : str
        Catalogue fields (``currency`` is ISO 4217).
    current_price : float
        Regular (list) price in the last period.
    unit_cost : float
        Unit cost in the last period.
    min_price, max_price : float
        Default business bounds for repricing: no lower than 10% above cost or 25% below
        the current price, no higher than 35% above it.
    history : History
        What the shop recorded (whole units in the catalogue).
    truth : TrueDemand
        The equation the history was drawn from.
    regular_price : FloatArray
        List price per history period (the shelf price before promotions and vouchers).
    demand : FloatArray
        Units that would have sold with stock on hand (``history.units`` censors it in
        stockout weeks).
    mean_units : FloatArray
        True mean demand per history period (:meth:`TrueDemand.expected_units`).

    Examples
    --------
    >>> product = simulate_product(3, elasticity=-2.5)
    >>> product.history.n_periods, product.truth.form
    (104, 'log-log')
    """

    sku: str
    name: str
    family: str
    currency: str
    current_price: float
    unit_cost: float
    min_price: float
    max_price: float
    history: History
    truth: TrueDemand
    regular_price: FloatArray
    demand: FloatArray
    mean_units: FloatArray


@dataclass(frozen=True, eq=False)
class Catalogue:
    """The whole invented shop: products, families, weekly periods and the seed.

    Examples
    --------
    >>> cat = generate_catalogue(7)
    >>> len(cat.in_family("green")), cat.product("TEA-002").family
    (8, 'green')
    """

    seed: int
    periods: DateArray
    families: tuple[str, ...]
    products: tuple[ScenarioProduct, ...]

    def product(self, sku: str) -> ScenarioProduct:
        """The product with this sku (``KeyError`` if unknown)."""
        for product in self.products:
            if product.sku == sku:
                return product
        raise KeyError(sku)

    def in_family(self, family: str) -> tuple[ScenarioProduct, ...]:
        """The products of one family, in sku order."""
        return tuple(p for p in self.products if p.family == family)


# ----------------------------------------------------------------------------- calendar


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


def _rival_index(rng: np.random.Generator, n: int) -> FloatArray:
    drift = np.linspace(0.0, rng.uniform(-0.05, 0.08), n)
    log_index = drift + _ar1(rng, n, phi=0.8, sd=0.025)
    return np.asarray(np.round(np.exp(log_index), 4), dtype=np.float64)


def _ad_spend(
    rng: np.random.Generator, n: int, holiday: FloatArray, *, budget: float
) -> FloatArray:
    campaign = rng.random(n) < 0.12
    burst = np.where(campaign, rng.uniform(1.8, 3.0, n), 1.0) * (1.0 + holiday)
    return np.round(budget * burst * np.exp(rng.normal(0.0, 0.25, n)), 2)


def _promo_weeks(rng: np.random.Generator, n: int, rate: float, *, minimum: int = 0) -> FloatArray:
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


def _log_cost_deviation(rng: np.random.Generator, n: int) -> FloatArray:
    """Log unit cost relative to its start: slow drift plus occasional supplier steps."""
    walk = np.cumsum(rng.normal(0.0, 0.004, n))
    return np.clip(walk + _steps(rng, n, expected=1.0, mean=0.02, sd=0.06), -0.2, 0.2)


def _volatile_log_cost(rng: np.random.Generator, n: int) -> FloatArray:
    """Harvest-driven cost: five supplier steps that alternate up and down."""
    path = np.cumsum(rng.normal(0.0, 0.002, n))
    size = rng.uniform(0.12, 0.16)
    for k, sign in enumerate((1.0, -1.0, 1.0, -1.0, 1.0)):
        path[(k + 1) * n // 6 :] += sign * size
    return path


@dataclass(frozen=True)
class _Prices:
    shelf: FloatArray
    regular: FloatArray
    cost: FloatArray


def _price_paths(
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
) -> _Prices:
    cost = np.round(base_price * cost_share * np.exp(log_cost), 2)
    log_list = _steps(rng, n, expected=list_changes, mean=0.02, sd=0.06)
    # Bounded so that list prices stay within about 20% of the base price.
    log_regular = np.clip(pass_through * log_cost + log_list, -0.18, 0.18)
    regular = np.round(base_price * np.exp(log_regular), 2)
    depth = rng.choice(_PROMO_DEPTHS, n) * promo if discount_promos else np.zeros(n)
    voucher = np.exp(rng.normal(0.0, price_noise, n)) if price_noise > 0 else np.ones(n)
    shelf = regular * (1.0 - depth) * voucher
    return _Prices(shelf=shelf, regular=regular, cost=cost)


# ----------------------------------------------------------------------------- truth


def _native_truth(
    *,
    form: DemandForm,
    elasticity: float,
    base_price: float,
    base_units: float,
    effects: Mapping[str, float],
    reference: Mapping[str, float],
    cross_effects: Mapping[str, float],
    cross_reference: Mapping[str, float],
    noise_sd: float,
    trap: Trap | None = None,
    endogeneity: float = 0.0,
) -> TrueDemand:
    """Turn effects stated at the base point into the form's own coefficients.

    ``effects`` are elasticities for log covariates and proportional lifts (log points
    for the log forms) for the 0/1 flags; ``cross_effects`` are cross elasticities.
    """
    if form == "linear":
        price_coef = elasticity * base_units / base_price
        coefs = {name: effect * base_units for name, effect in effects.items()}
        cross = {k: e * base_units / cross_reference[k] for k, e in cross_effects.items()}
    elif form == "semi-log":
        price_coef = elasticity / base_price
        coefs = dict(effects)
        cross = {k: e / cross_reference[k] for k, e in cross_effects.items()}
    else:
        price_coef = elasticity
        coefs = dict(effects)
        cross = dict(cross_effects)
    truth = TrueDemand(
        form=form,
        intercept=0.0,
        price_coef=float(price_coef),
        elasticity_at_base=float(elasticity),
        covariate_coefs={k: float(v) for k, v in coefs.items()},
        log_covariates=LOG_COVARIATES,
        cross_price_coefs={k: float(v) for k, v in cross.items()},
        noise=_NOISE_BY_FORM[form],
        noise_sd=float(noise_sd),
        base_price=float(base_price),
        base_units=float(base_units),
        covariate_reference={k: float(v) for k, v in reference.items()},
        cross_price_reference={k: float(v) for k, v in cross_reference.items()},
        trap=trap,
        endogeneity=float(endogeneity),
    )
    # Calibrate the intercept so that the base point yields base_units (before noise).
    target = base_units if form == "linear" else np.log(base_units)
    offset = float(truth.linear_predictor(base_price))
    return replace(truth, intercept=float(target) - offset)


def _draw_demand(
    truth: TrueDemand, eta: FloatArray, shock: FloatArray, rng: np.random.Generator
) -> FloatArray:
    """Demand from the predictor; ``shock`` is the standard normal draw per period."""
    if truth.noise == "lognormal":
        return np.asarray(np.exp(eta + truth.noise_sd * shock), dtype=np.float64)
    if truth.noise == "normal":
        return np.maximum(eta + truth.noise_sd * shock, 0.0)
    return rng.poisson(np.exp(eta)).astype(np.float64)


def _censor(
    rng: np.random.Generator, demand: FloatArray, *, stockout_rate: float, whole_units: bool
) -> tuple[FloatArray, BoolArray]:
    n = demand.shape[0]
    in_stock: BoolArray = np.asarray(rng.random(n) >= stockout_rate, dtype=np.bool_)
    sold = rng.uniform(*_STOCKOUT_SHARE_SOLD, n) * demand
    if whole_units:
        sold = np.floor(sold)
    units: FloatArray = np.where(in_stock, demand, sold)
    return units, in_stock


def _bounds(current_price: float, unit_cost: float) -> tuple[float, float]:
    low = round(max(1.10 * unit_cost, 0.75 * current_price), 2)
    return low, round(1.35 * current_price, 2)


# ----------------------------------------------------------------------------- one product


def simulate_product(
    rng: np.random.Generator | int,
    *,
    form: DemandForm = "log-log",
    elasticity: float = -2.0,
    n_periods: int = 104,
    base_price: float = 10.0,
    base_units: float = 100.0,
    noise_sd: float | None = None,
    rival_effect: float = 0.8,
    promo_lift: float = 0.2,
    ad_effect: float = 0.08,
    holiday_lift: float = 0.3,
    cross_effects: Mapping[str, float] | None = None,
    promo_rate: float = 0.1,
    pass_through: float = 0.7,
    list_changes: float = 1.5,
    price_noise: float = 0.03,
    endogeneity: float = 0.0,
    stockout_rate: float = 0.0,
    round_units: bool = False,
    start: str = "2024-01-01",
    sku: str = "SIM-001",
) -> ScenarioProduct:
    """Simulate one product's weekly history from explicitly given true parameters.

    Effects are stated at the base point and converted to the form's own coefficients,
    which the returned ``truth`` reports (see :class:`TrueDemand`). With the defaults
    (no stockouts, no rounding, exogenous price) the data follow the module's
    data-generating process exactly, so a correctly specified regression's 95%
    confidence interval covers the truth about 95% of the time.

    Parameters
    ----------
    rng : numpy.random.Generator or int
        Random generator, or a seed for ``numpy.random.default_rng``.
    form : {"log-log", "semi-log", "linear", "poisson"}
        Functional form and its noise model.
    elasticity : float
        Own-price elasticity at the base point.
    n_periods : int
        Number of weekly periods, starting on the Monday ``start``.
    base_price, base_units : float
        The base point: price, and units before noise (median for the log forms, mean
        for ``linear`` and ``poisson``) with rival index 1, no promotion, no holiday and
        ad spend at its baseline (200 a week).
    noise_sd : float, optional
        Noise scale on the form's own scale: log error sd (default 0.2) for the log
        forms, units (default ``0.1 * base_units``) for ``linear``. Poisson takes none.
    rival_effect, ad_effect : float
        Elasticities of demand with respect to the rival price index and ad spend
        (both enter as logs).
    promo_lift, holiday_lift : float
        Lift in promotion / holiday weeks: log points for the log forms, a share of
        ``base_units`` for ``linear``. The promotion lift comes on top of its price cut.
    cross_effects : mapping of str to float, optional
        Cross-price elasticities at the base point, keyed by an invented sibling sku;
        each sibling gets its own price path around ``base_price``.
    promo_rate : float
        Probability that a week is a promotion week (10-25% off the shelf price).
    pass_through : float
        Log-price response to log-cost moves (0: the price ignores cost).
    list_changes : float
        Expected number of list-price changes over the history.
    price_noise : float
        Standard deviation of the weekly voucher-mix noise on log price.
    endogeneity : float
        Log-price response to a one-standard-deviation demand shock (0: exogenous
        price). Not available for ``poisson``, which has no separate demand shock.
    stockout_rate : float
        Probability of a supply-driven stockout week, in which only 15-85% of demand
        sells (units are then censored).
    round_units : bool
        Record whole units (rounded; Poisson counts are whole anyway).
    start : str
        ISO date of the first Monday.
    sku : str
        The product's sku.

    Returns
    -------
    ScenarioProduct
        Catalogue fields, the ``History`` (covariates :data:`COVARIATES`, cross prices
        keyed by sibling sku) and the ``TrueDemand``.

    Examples
    --------
    >>> product = simulate_product(42, form="log-log", elasticity=-2.2)
    >>> product.truth.price_coef, sorted(product.history.covariates)
    (-2.2, ['ad_spend', 'holiday', 'promo', 'rival_price'])
    """
    if form not in _NOISE_BY_FORM:
        raise ValueError(f"unknown form {form!r}")
    if form == "poisson" and noise_sd not in (None, 0.0):
        raise ValueError("a poisson product has no noise_sd: counts carry their own noise")
    if form == "poisson" and endogeneity != 0.0:
        raise ValueError("endogeneity needs a demand shock; poisson has none")
    if base_price <= 0 or base_units <= 0:
        raise ValueError("base_price and base_units must be positive")
    gen = rng if isinstance(rng, np.random.Generator) else np.random.default_rng(rng)
    periods = weekly_periods(start, n_periods)
    n = n_periods
    holiday = holiday_flags(periods)
    ad_budget = 200.0
    covariates = {
        "rival_price": _rival_index(gen, n),
        "promo": _promo_weeks(gen, n, promo_rate),
        "ad_spend": _ad_spend(gen, n, holiday, budget=ad_budget),
        "holiday": holiday,
    }
    shock = gen.standard_normal(n)
    prices = _price_paths(
        gen,
        n,
        base_price=base_price,
        cost_share=0.5,
        promo=covariates["promo"],
        pass_through=pass_through,
        list_changes=list_changes,
        price_noise=price_noise,
        log_cost=_log_cost_deviation(gen, n),
    )
    shelf = np.round(prices.shelf * np.exp(endogeneity * shock), 2)
    cross_effects = dict(cross_effects or {})
    cross_prices: dict[str, FloatArray] = {}
    for sibling in cross_effects:
        sibling_promo = _promo_weeks(gen, n, promo_rate)
        sibling_prices = _price_paths(
            gen,
            n,
            base_price=base_price,
            cost_share=0.5,
            promo=sibling_promo,
            pass_through=pass_through,
            list_changes=list_changes,
            price_noise=price_noise,
            log_cost=_log_cost_deviation(gen, n),
        )
        cross_prices[sibling] = np.round(sibling_prices.shelf, 2)
    if noise_sd is None:
        noise_sd = {"linear": 0.1 * base_units, "poisson": 0.0}.get(form, 0.2)
    truth = _native_truth(
        form=form,
        elasticity=elasticity,
        base_price=base_price,
        base_units=base_units,
        effects={
            "rival_price": rival_effect,
            "promo": promo_lift,
            "ad_spend": ad_effect,
            "holiday": holiday_lift,
        },
        reference={"rival_price": 1.0, "promo": 0.0, "ad_spend": ad_budget, "holiday": 0.0},
        cross_effects=cross_effects,
        cross_reference={k: base_price for k in cross_effects},
        noise_sd=noise_sd,
        endogeneity=endogeneity,
    )
    eta = truth.linear_predictor(shelf, covariates=covariates, cross_prices=cross_prices)
    demand = _draw_demand(truth, eta, shock, gen)
    if round_units:
        demand = np.maximum(np.rint(demand), 0.0)
    units, in_stock = _censor(
        gen, demand, stockout_rate=stockout_rate, whole_units=round_units or form == "poisson"
    )
    history = History(
        sku=sku,
        periods=periods,
        price=shelf,
        units=units,
        unit_cost=prices.cost,
        in_stock=in_stock,
        covariates=covariates,
        cross_prices=cross_prices,
    )
    current = float(prices.regular[-1])
    latest_cost = float(prices.cost[-1])
    low, high = _bounds(current, latest_cost)
    return ScenarioProduct(
        sku=sku,
        name=f"Simulated tin {sku}",
        family="simulated",
        currency=CURRENCY,
        current_price=current,
        unit_cost=latest_cost,
        min_price=low,
        max_price=high,
        history=history,
        truth=truth,
        regular_price=prices.regular,
        demand=demand,
        mean_units=truth.expected_units(shelf, covariates=covariates, cross_prices=cross_prices),
    )


# ----------------------------------------------------------------------------- catalogue

_NAMES: dict[str, tuple[str, ...]] = {
    "green": (
        "First Flush Sencha tin 50 g",
        "Ceremonial Matcha tin 30 g",
        "Bamboo matcha whisk",
        "Jasmine Pearl tin 100 g",
        "Gunpowder Mint tin 125 g",
        "Genmaicha Toasted Rice tin 100 g",
        "Dragon Well Spring tin 50 g",
        "Hojicha Ember tin 80 g",
        "Lemon Leaf Green tin 100 g",
        "Bancha Everyday tin 200 g",
    ),
    "black": (
        "Harbour Breakfast tin 250 g",
        "Assam Copper tin 125 g",
        "Bergamot Grey tin 100 g",
        "Darjeeling Second Flush tin 100 g",
        "Smoky Pine Souchong tin 100 g",
        "Ceylon Highlands tin 125 g",
        "Masala Chai Spice tin 150 g",
        "Yunnan Golden Tips tin 50 g",
        "Vanilla Fireside tin 100 g",
        "Keemun Rose tin 100 g",
    ),
    "oolong": (
        "Mountain Mist Oolong tin 75 g",
        "Milk Oolong tin 100 g",
        "Iron Goddess tin 100 g",
        "Oriental Beauty tin 50 g",
        "Roasted Cliff Oolong tin 50 g",
        "Honey Orchid Dancong tin 50 g",
        "White Peach Oolong tin 100 g",
        "Osmanthus Oolong tin 75 g",
        "High Mountain Frost tin 50 g",
        "Charcoal Roast Oolong tin 75 g",
    ),
    "herbal": (
        "Chamomile Calm tin 60 g",
        "Peppermint Fresh tin 75 g",
        "Rooibos Vanilla tin 125 g",
        "Hibiscus Berry tin 100 g",
        "Lemon Ginger tin 100 g",
        "Lavender Evening tin 60 g",
        "Turmeric Glow tin 100 g",
        "Fennel Hearth tin 80 g",
        "Honeybush Orange tin 100 g",
        "Nettle Garden tin 60 g",
    ),
    "gift-sets": (
        "Four Seasons sampler (4 tins)",
        "Tea-for-one porcelain set",
        "Advent calendar (24 sachets)",
        "Explorer gift box (6 tins)",
        "Oolong tasting flight (3 tins)",
        "Cast-iron teapot gift set",
        "Green tea discovery box (5 tins)",
        "Herbal comfort hamper",
        "Breakfast duo gift tin",
        "Glass teapot starter set",
    ),
}
_PRICE_RANGE = {
    "green": (6.0, 24.0),
    "black": (4.0, 14.0),
    "oolong": (10.0, 40.0),
    "herbal": (4.0, 12.0),
    "gift-sets": (18.0, 40.0),
}
# Seed-independent layout: which slot holds which special product.
_TRAP_SLOTS: dict[tuple[str, int], Trap] = {
    ("green", 0): "endogenous-price",
    ("black", 0): "flat-price",
    ("oolong", 0): "short-history",
}
_MATCHA, _WHISK = ("green", 1), ("green", 2)
_FORM_CYCLE: tuple[DemandForm, ...] = (
    "log-log",
    "semi-log",
    "log-log",
    "linear",
    "log-log",
    "poisson",
    "log-log",
    "log-log",
)


@dataclass(frozen=True)
class _Slot:
    sku: str
    name: str
    family: str
    index: int
    form: DemandForm
    trap: Trap | None


def _layout(n_products: int) -> list[_Slot]:
    counts = [n_products // len(FAMILIES)] * len(FAMILIES)
    for i in range(n_products % len(FAMILIES)):
        counts[i] += 1
    slots: list[_Slot] = []
    cycle_position = 0
    for family, count in zip(FAMILIES, counts, strict=True):
        pool = _NAMES[family]
        for index in range(count):
            name = pool[index % len(pool)]
            if index >= len(pool):
                name = f"{name} refill pouch" + ("" if index < 2 * len(pool) else f" {index}")
            trap = _TRAP_SLOTS.get((family, index))
            form: DemandForm
            if trap is not None or (family, index) == _MATCHA:
                form = "log-log"
            elif (family, index) == _WHISK:
                form = "poisson"
            else:
                form = _FORM_CYCLE[cycle_position % len(_FORM_CYCLE)]
                cycle_position += 1
            sku = f"TEA-{len(slots) + 1:03d}"
            slots.append(_Slot(sku, name, family, index, form, trap))
    return slots


@dataclass(frozen=True)
class _Draft:
    """A product whose prices exist but whose demand waits for its siblings' prices."""

    slot: _Slot
    rng: np.random.Generator
    base_price: float
    promo: FloatArray
    shock: FloatArray
    prices: _Prices
    shelf: FloatArray


def _base_price(rng: np.random.Generator, slot: _Slot) -> float:
    if (slot.family, slot.index) == _MATCHA:
        low, high = 20.0, 32.0
    elif (slot.family, slot.index) == _WHISK:
        low, high = 12.0, 20.0
    else:
        low, high = _PRICE_RANGE[slot.family]
    return round(float(rng.uniform(low, high)), 2)


def _draft(slot: _Slot, rng: np.random.Generator, n: int, endogeneity: float) -> _Draft:
    base_price = _base_price(rng, slot)
    promo = _promo_weeks(rng, n, float(rng.uniform(0.06, 0.14)), minimum=3)
    shock = rng.standard_normal(n)
    options: dict[str, float] = {
        "pass_through": float(rng.uniform(0.4, 0.9)),
        "list_changes": 1.2,
        "price_noise": 0.015,
    }
    if slot.trap == "endogenous-price":
        # Cost steps (with promotions) are the only exogenous price movers, and strong
        # ones, so the demand-driven moves dominate OLS while IV on cost still works.
        options = {"pass_through": 1.0, "list_changes": 0.0, "price_noise": 0.0}
    elif slot.trap == "flat-price":
        options = {"pass_through": 0.0, "list_changes": 0.0, "price_noise": 0.0}
    prices = _price_paths(
        rng,
        n,
        base_price=base_price,
        cost_share=float(rng.uniform(0.40, 0.60)),
        promo=promo,
        discount_promos=slot.trap != "flat-price",
        log_cost=(
            _volatile_log_cost(rng, n)
            if slot.trap == "endogenous-price"
            else _log_cost_deviation(rng, n)
        ),
        **options,
    )
    shelf = prices.shelf
    if slot.trap == "endogenous-price":
        shelf = shelf * np.exp(endogeneity * shock)
    elif slot.trap == "flat-price":
        voucher_weeks = rng.choice(np.flatnonzero(promo == 0), 2, replace=False)
        shelf = shelf.copy()
        shelf[voucher_weeks] *= 0.98
    return _Draft(slot, rng, base_price, promo, shock, prices, np.round(shelf, 2))


def _base_units(rng: np.random.Generator, slot: _Slot) -> float:
    if slot.form == "poisson":
        return float(rng.uniform(0.8, 3.0))
    if slot.form == "linear":
        return float(rng.uniform(80.0, 250.0))
    low, high = (20.0, 60.0) if slot.family == "gift-sets" else (25.0, 300.0)
    if slot.family == "oolong":
        high = 120.0
    return float(np.exp(rng.uniform(np.log(low), np.log(high))))


def _cross_effects(draft: _Draft, siblings: list[_Draft]) -> dict[str, float]:
    slot, rng = draft.slot, draft.rng
    place = (slot.family, slot.index)
    drivers = [s for s in siblings if s.slot.trap is None and s.slot.sku != slot.sku]
    effects: dict[str, float] = {}
    if place in (_MATCHA, _WHISK):
        partner = _WHISK if place == _MATCHA else _MATCHA
        for s in drivers:
            if (s.slot.family, s.slot.index) == partner:
                # The complement pair: a dearer whisk sells less matcha, and back.
                effects[s.slot.sku] = -float(rng.uniform(0.2, 0.4))
        drivers = [s for s in drivers if (s.slot.family, s.slot.index) not in (_MATCHA, _WHISK)]
    wanted = int(rng.integers(1, 3)) - len(effects)
    if wanted > 0 and drivers:
        chosen = rng.choice(len(drivers), min(wanted, len(drivers)), replace=False)
        top = 0.4 if slot.form == "linear" else 0.6
        for i in sorted(int(c) for c in chosen):
            effects[drivers[i].slot.sku] = float(rng.uniform(0.15, top))
    return effects


def _finish(
    draft: _Draft,
    siblings: list[_Draft],
    *,
    covariates: dict[str, FloatArray],
    ad_budget: float,
    periods: DateArray,
    endogeneity: float,
) -> ScenarioProduct:
    slot, rng = draft.slot, draft.rng
    n = periods.shape[0]
    cross_effects = _cross_effects(draft, siblings)
    by_sku = {s.slot.sku: s for s in siblings}
    if slot.form == "linear":
        elasticity = float(rng.uniform(-2.0, -1.2))
    elif slot.form == "semi-log":
        elasticity = float(rng.uniform(-3.0, -1.2))
    elif slot.trap == "endogenous-price":
        elasticity = float(rng.uniform(-1.5, -1.2))
    else:
        elasticity = float(rng.uniform(-3.5, -1.2))
    holiday_range = (0.5, 1.0) if slot.family == "gift-sets" else (0.05, 0.35)
    if slot.form == "linear":
        noise_sd = float(rng.uniform(0.06, 0.12))
    elif slot.form == "poisson":
        noise_sd = 0.0
    else:
        noise_sd = 0.35 if slot.trap == "endogenous-price" else float(rng.uniform(0.10, 0.25))
    base_units = _base_units(rng, slot)
    truth = _native_truth(
        form=slot.form,
        elasticity=elasticity,
        base_price=draft.base_price,
        base_units=base_units,
        effects={
            "rival_price": float(rng.uniform(0.3, 1.2)),
            "promo": float(rng.uniform(0.08, 0.30)),
            "ad_spend": float(rng.uniform(0.03, 0.15)),
            "holiday": float(rng.uniform(*holiday_range)),
        },
        reference={"rival_price": 1.0, "promo": 0.0, "ad_spend": ad_budget, "holiday": 0.0},
        cross_effects=cross_effects,
        cross_reference={k: by_sku[k].base_price for k in cross_effects},
        noise_sd=noise_sd * (base_units if slot.form == "linear" else 1.0),
        trap=slot.trap,
        endogeneity=endogeneity if slot.trap == "endogenous-price" else 0.0,
    )
    cross_prices = {k: by_sku[k].shelf for k in cross_effects}
    eta = truth.linear_predictor(draft.shelf, covariates=covariates, cross_prices=cross_prices)
    demand = np.maximum(np.rint(_draw_demand(truth, eta, draft.shock, rng)), 0.0)
    has_stockouts = slot.trap is None and rng.random() < 0.35
    stockout_rate = float(rng.uniform(0.03, 0.08)) if has_stockouts else 0.0
    units, in_stock = _censor(rng, demand, stockout_rate=stockout_rate, whole_units=True)
    mean_units = truth.expected_units(draft.shelf, covariates=covariates, cross_prices=cross_prices)
    keep = slice(n - SHORT_HISTORY_PERIODS if slot.trap == "short-history" else 0, n)
    history = History(
        sku=slot.sku,
        periods=periods[keep],
        price=draft.shelf[keep],
        units=units[keep],
        unit_cost=draft.prices.cost[keep],
        in_stock=in_stock[keep],
        covariates={k: v[keep] for k, v in covariates.items()},
        cross_prices={k: v[keep] for k, v in cross_prices.items()},
    )
    current = float(draft.prices.regular[-1])
    latest_cost = float(draft.prices.cost[-1])
    low, high = _bounds(current, latest_cost)
    return ScenarioProduct(
        sku=slot.sku,
        name=slot.name,
        family=slot.family,
        currency=CURRENCY,
        current_price=current,
        unit_cost=latest_cost,
        min_price=low,
        max_price=high,
        history=history,
        truth=truth,
        regular_price=draft.prices.regular[keep],
        demand=demand[keep],
        mean_units=mean_units[keep],
    )


def generate_catalogue(
    seed: int = 7,
    *,
    n_products: int = 40,
    n_periods: int = 104,
    start: str = "2024-01-01",
) -> Catalogue:
    """Generate the invented tea shop: products in five families with weekly histories.

    Products are spread evenly over :data:`FAMILIES` and numbered ``TEA-001``,
    ``TEA-002``, ... family by family. The layout is fixed (which slot has which form,
    which products are traps, the matcha/whisk complement pair); the seed draws every
    number. Forms: mostly ``log-log``, with ``semi-log``, ``linear`` and low-volume
    ``poisson`` products (the source of zero-sale weeks). Each product's demand responds
    to the prices of 1-2 siblings in its family; trap products never drive a sibling.

    Parameters
    ----------
    seed : int
        Seed for ``numpy.random.SeedSequence``; the same seed gives identical arrays.
    n_products : int
        Number of products, 15 to 100 (at least three per family).
    n_periods : int
        Number of weekly periods, at least 16.
    start : str
        ISO date of the first period; must be a Monday.

    Returns
    -------
    Catalogue
        Products with their histories and true demand equations.

    Examples
    --------
    >>> cat = generate_catalogue(11, n_products=20, n_periods=52)
    >>> len(cat.products), cat.periods.shape
    (20, (52,))
    >>> cat.product("TEA-002").truth.cross_price_coefs["TEA-003"] < 0  # matcha and whisk
    True
    """
    if not MIN_PRODUCTS <= n_products <= MAX_PRODUCTS:
        raise ValueError(f"n_products must be between {MIN_PRODUCTS} and {MAX_PRODUCTS}")
    if n_periods < 2 * SHORT_HISTORY_PERIODS:
        raise ValueError(f"n_periods must be at least {2 * SHORT_HISTORY_PERIODS}")
    periods = weekly_periods(start, n_periods)
    n = n_periods
    shop_seq, *product_seqs = np.random.SeedSequence(seed).spawn(1 + n_products)
    shop = np.random.default_rng(shop_seq)
    holiday = holiday_flags(periods)
    rival = _rival_index(shop, n)
    budgets = {family: round(float(shop.uniform(150.0, 600.0)), 2) for family in FAMILIES}
    ad_by_family = {f: _ad_spend(shop, n, holiday, budget=b) for f, b in budgets.items()}
    endogeneity = 0.1
    drafts = [
        _draft(slot, np.random.default_rng(seq), n, endogeneity)
        for slot, seq in zip(_layout(n_products), product_seqs, strict=True)
    ]
    products = []
    for draft in drafts:
        family = draft.slot.family
        covariates = {
            "rival_price": rival,
            "promo": draft.promo,
            "ad_spend": ad_by_family[family],
            "holiday": holiday,
        }
        siblings = [d for d in drafts if d.slot.family == family]
        products.append(
            _finish(
                draft,
                siblings,
                covariates=covariates,
                ad_budget=budgets[family],
                periods=periods,
                endogeneity=endogeneity,
            )
        )
    return Catalogue(seed=seed, periods=periods, families=FAMILIES, products=tuple(products))
