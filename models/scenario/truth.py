"""The true demand equation of an invented product, and drawing demand from it."""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, replace
from typing import Literal, TypeAlias

import numpy as np

from models._typing import BoolArray, FloatArray

DemandForm: TypeAlias = Literal["log-log", "semi-log", "linear", "poisson"]
NoiseModel: TypeAlias = Literal["lognormal", "normal", "poisson"]
Trap: TypeAlias = Literal["flat-price", "short-history", "endogenous-price"]

COVARIATES: tuple[str, ...] = ("rival_price", "promo", "ad_spend", "holiday")
"""Covariate names recorded for every product, in this order."""
LOG_COVARIATES: tuple[str, ...] = ("rival_price", "ad_spend")
"""Covariates that enter the true demand equation as natural logs."""

NOISE_BY_FORM: dict[str, NoiseModel] = {
    "log-log": "lognormal",
    "semi-log": "lognormal",
    "linear": "normal",
    "poisson": "poisson",
}
_STOCKOUT_SHARE_SOLD = (0.15, 0.85)


@dataclass(frozen=True)
class TrueDemand:
    """The true demand equation of one product, in the form's own coefficients.

    Parameters
    ----------
    form : {"log-log", "semi-log", "linear", "poisson"}
        Functional form of the equation (see :mod:`models.scenario`).
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
    >>> from models.scenario import simulate_product
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
        >>> import numpy as np
        >>> from models.scenario import simulate_product
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
        >>> from models.scenario import simulate_product
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
        >>> from models.scenario import simulate_product
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


def native_truth(
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
        noise=NOISE_BY_FORM[form],
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


def draw_demand(
    truth: TrueDemand, eta: FloatArray, shock: FloatArray, rng: np.random.Generator
) -> FloatArray:
    """Demand from the predictor; ``shock`` is the standard normal draw per period."""
    if truth.noise == "lognormal":
        return np.asarray(np.exp(eta + truth.noise_sd * shock), dtype=np.float64)
    if truth.noise == "normal":
        return np.maximum(eta + truth.noise_sd * shock, 0.0)
    return rng.poisson(np.exp(eta)).astype(np.float64)


def censor(
    rng: np.random.Generator, demand: FloatArray, *, stockout_rate: float, whole_units: bool
) -> tuple[FloatArray, BoolArray]:
    """Units sold and in-stock flags: in a stockout week only 15-85% of demand sells."""
    n = demand.shape[0]
    in_stock: BoolArray = np.asarray(rng.random(n) >= stockout_rate, dtype=np.bool_)
    sold = rng.uniform(*_STOCKOUT_SHARE_SOLD, n) * demand
    if whole_units:
        sold = np.floor(sold)
    units: FloatArray = np.where(in_stock, demand, sold)
    return units, in_stock
