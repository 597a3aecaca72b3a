"""One product simulated from explicitly given true parameters: :func:`simulate_product`."""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np

from models._typing import FloatArray
from models.history import History
from models.scenario.drivers import (
    ad_spend,
    holiday_flags,
    log_cost_deviation,
    price_paths,
    promo_weeks,
    rival_index,
    weekly_periods,
)
from models.scenario.products import CURRENCY, ScenarioProduct, repricing_bounds
from models.scenario.truth import (
    NOISE_BY_FORM,
    DemandForm,
    censor,
    draw_demand,
    native_truth,
)


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
    (no stockouts, no rounding, exogenous price) the data follow the package's
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
    if form not in NOISE_BY_FORM:
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
        "rival_price": rival_index(gen, n),
        "promo": promo_weeks(gen, n, promo_rate),
        "ad_spend": ad_spend(gen, n, holiday, budget=ad_budget),
        "holiday": holiday,
    }
    shock = gen.standard_normal(n)
    prices = price_paths(
        gen,
        n,
        base_price=base_price,
        cost_share=0.5,
        promo=covariates["promo"],
        pass_through=pass_through,
        list_changes=list_changes,
        price_noise=price_noise,
        log_cost=log_cost_deviation(gen, n),
    )
    shelf = np.round(prices.shelf * np.exp(endogeneity * shock), 2)
    cross_effects = dict(cross_effects or {})
    cross_prices: dict[str, FloatArray] = {}
    for sibling in cross_effects:
        sibling_promo = promo_weeks(gen, n, promo_rate)
        sibling_prices = price_paths(
            gen,
            n,
            base_price=base_price,
            cost_share=0.5,
            promo=sibling_promo,
            pass_through=pass_through,
            list_changes=list_changes,
            price_noise=price_noise,
            log_cost=log_cost_deviation(gen, n),
        )
        cross_prices[sibling] = np.round(sibling_prices.shelf, 2)
    if noise_sd is None:
        noise_sd = {"linear": 0.1 * base_units, "poisson": 0.0}.get(form, 0.2)
    truth = native_truth(
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
    demand = draw_demand(truth, eta, shock, gen)
    if round_units:
        demand = np.maximum(np.rint(demand), 0.0)
    units, in_stock = censor(
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
    low, high = repricing_bounds(current, latest_cost)
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
