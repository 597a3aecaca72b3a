"""Products with known true demand for the decision study (``bench/decisions.py``).

Two generators:

* ``tea-shop``: the demo's seeded tea shop (:func:`models.generate_catalogue`), fitted with
  the demo's default spec (form chosen by hold-out error, every recorded driver, the
  believed competitors' prices).
* ``market-share``: a generator of our own design that none of the offered forms
  matches. Weekly units are a share of a market: ``M * s(p)`` with the logistic share
  ``s = 1 / (1 + exp(-(a - beta * p + lift * promo + heat * temperature)))``, Poisson counts
  on a lognormal weekly shock (sd 0.15-0.40), 78 weeks. List prices move in steps of 3-10%
  every 10-20 weeks, with 15-30% promotion discounts in 5-12% of the weeks (no week-to-week
  price noise); a seasonal temperature index is a second covariate. The own-price
  elasticity at the base price is drawn from U(-3.0, -1.0), the base share from U(0.1, 0.6).
  In the ``near best`` variant the shop is well run: the whole list-price path is scaled
  so that the current price lies within 8% of the true best price, the case where a
  service that moves prices can most easily do harm.

Each case carries what scoring needs: the fit (None when refused), the cost, the current
price, the constraints, the true expected profit as a function of the price at the
scenario the recommendation evaluates, the true elasticity at the current price, and the
generator's range of elasticities (its prior, uniform).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterator
from dataclasses import dataclass, replace

import numpy as np

from models import (
    DemandFit,
    History,
    ModelSpec,
    PriceConstraints,
    fit_demand,
    generate_catalogue,
    shrink_own_price,
)
from models._typing import FloatArray
from models.design import event_covariates
from models.scenario import COVARIATES, LOG_COVARIATES, ScenarioProduct
from service.core.settings import Settings
from service.estimation.gates import quality_gates

ProfitCurve = Callable[[FloatArray], FloatArray]


@dataclass(frozen=True)
class Case:
    """One product to price, with its known truth."""

    generator: str
    sku: str
    fit: DemandFit | None
    refused: str | None
    unit_cost: float
    current_price: float
    constraints: PriceConstraints
    price_range: tuple[float, float]
    true_profit: ProfitCurve
    true_elasticity: float
    prior: tuple[float, float]
    family: str | None = None
    shrunk: DemandFit | None = None


def with_shrinkage(cases: list[Case]) -> list[Case]:
    """The cases with each accepted fit's shrunk copy (own-price elasticities shrunk toward
    their family and the catalogue by :func:`models.shrink_own_price`)."""
    accepted = [c for c in cases if c.fit is not None]
    if len(accepted) < 3:
        return cases
    fits = [c.fit for c in accepted if c.fit is not None]
    families = {c.sku: c.family for c in accepted if c.family is not None}
    result = shrink_own_price(fits, families=families or None)
    shrunk = {f.sku: f for f in result.fits}
    return [replace(c, shrunk=shrunk.get(c.sku)) if c.fit is not None else c for c in cases]


def _fit_or_refusal(history: History, spec: ModelSpec) -> tuple[DemandFit | None, str | None]:
    """The fit, or why the service would refuse to price from it (its quality gates)."""
    try:
        fit = fit_demand(history, spec)
    except (ValueError, ArithmeticError, np.linalg.LinAlgError) as error:
        return None, f"fit failed: {type(error).__name__}"
    failed = [g.name for g in quality_gates(fit, None, Settings()) if not g.passed]
    if failed:
        return None, "gates: " + ", ".join(failed)
    return fit, None


def _observed(history: History) -> tuple[float, float]:
    price = history.price[history.in_stock]
    return float(price.min()), float(price.max())


# ---------------------------------------------------------------- the demo tea shop


def _tea_prior(product: ScenarioProduct) -> tuple[float, float]:
    """The tea shop's range of elasticities for this kind of product (see the catalogue)."""
    truth = product.truth
    if truth.form == "linear":
        return -2.0, -1.2
    if truth.form == "semi-log":
        return -3.0, -1.2
    if truth.trap == "endogenous-price":
        return -1.5, -1.2
    return -3.5, -1.2


def _tea_case(product: ScenarioProduct) -> Case:
    truth = product.truth
    spec = ModelSpec(
        form="auto",
        covariates=COVARIATES,
        log_covariates=LOG_COVARIATES,
        cross_prices=tuple(sorted(truth.cross_price_coefs)),
    )
    fit, refused = _fit_or_refusal(product.history, spec)
    # The true curve at the values the recommendation evaluates: the fit's default values
    # (the latest fitted period's, events off); for a refused product the same rule.
    if fit is not None:
        latest = fit.default_values
    else:
        h = product.history
        (events,) = event_covariates(tuple(h.covariates), h.covariates)
        latest = {k: float(v[-1]) for k, v in {**h.covariates, **h.cross_prices}.items()}
        latest |= dict.fromkeys(events, 0.0)
    cross = {k: v for k, v in latest.items() if k in truth.cross_price_coefs}
    covariates = {k: v for k, v in latest.items() if k in truth.covariate_coefs}
    cost = product.unit_cost

    def profit(price: FloatArray) -> FloatArray:
        units = truth.expected_units(price, covariates=covariates, cross_prices=cross)
        result: FloatArray = (price - cost) * np.maximum(units, 0.0)
        return result

    p0 = product.current_price
    elasticity = float(truth.own_price_elasticity(p0, covariates=covariates, cross_prices=cross))
    return Case(
        generator="tea-shop",
        sku=product.sku,
        fit=fit,
        refused=refused,
        unit_cost=cost,
        current_price=p0,
        constraints=PriceConstraints(min_price=product.min_price, max_price=product.max_price),
        price_range=fit.price_range if fit is not None else _observed(product.history),
        true_profit=profit,
        true_elasticity=elasticity,
        prior=_tea_prior(product),
        family=product.family,
    )


def tea_shop_cases(seed: int) -> Iterator[Case]:
    yield from with_shrinkage([_tea_case(p) for p in generate_catalogue(seed).products])


# ---------------------------------------------------------------- the market-share shop

MARKET_PRIOR = (-3.0, -1.0)
MARKET_WEEKS = 78


@dataclass(frozen=True)
class ShareTruth:
    market: float
    a: float
    beta: float
    lift: float
    heat: float

    def units(
        self, price: FloatArray, promo: FloatArray | float, temperature: FloatArray | float
    ) -> FloatArray:
        u = self.a - self.beta * price + self.lift * promo + self.heat * temperature
        result: FloatArray = self.market / (1.0 + np.exp(-u))
        return result


def _list_prices(rng: np.random.Generator, base: float, n: int) -> FloatArray:
    price = np.empty(n)
    level, week = base, 0
    while week < n:
        stretch = int(rng.integers(10, 21))
        price[week : week + stretch] = level
        week += stretch
        level *= 1.0 + float(rng.uniform(0.03, 0.10)) * (1 if rng.random() < 0.5 else -1)
        level = min(max(level, 0.8 * base), 1.25 * base)
    return price


def _best_price(truth: ShareTruth, cost: float, around: float) -> float:
    grid = np.linspace(cost, 4.0 * around, 4001)
    return float(grid[np.argmax((grid - cost) * truth.units(grid, 0.0, 0.0))])


def _share_case(rng: np.random.Generator, seed: int, i: int, near_best: bool) -> Case:
    base = math.exp(rng.uniform(math.log(3.0), math.log(30.0)))
    cost = base * float(rng.uniform(0.45, 0.70))
    share0 = float(rng.uniform(0.1, 0.6))
    elasticity0 = float(rng.uniform(*MARKET_PRIOR))
    beta = -elasticity0 / (base * (1.0 - share0))
    truth = ShareTruth(
        market=math.exp(rng.uniform(math.log(150.0), math.log(1500.0))),
        a=math.log(share0 / (1.0 - share0)) + beta * base,
        beta=beta,
        lift=float(rng.uniform(0.1, 0.4)),
        heat=float(rng.uniform(-0.3, 0.3)),
    )
    n = MARKET_WEEKS
    listed = _list_prices(rng, base, n)
    if near_best:  # a well-run shop: the current list price within 8% of the best one
        target = _best_price(truth, cost, base) * float(rng.uniform(0.92, 1.08))
        listed = np.round(listed * target / listed[-1], 2)
    promo = (rng.random(n) < rng.uniform(0.05, 0.12)).astype(float)
    price = np.round(listed * (1.0 - promo * rng.uniform(0.15, 0.30, n)), 2)
    weeks = np.arange(n)
    temperature = np.sin(2 * np.pi * weeks / 52.0) + 0.3 * rng.standard_normal(n)
    shock = float(rng.uniform(0.15, 0.40)) * rng.standard_normal(n)
    mean = truth.units(price, promo, temperature)
    units = rng.poisson(mean * np.exp(shock)).astype(float)
    sku = f"MS{'N' if near_best else ''}-{seed:03d}-{i:02d}"
    history = History(
        sku,
        np.arange("2024-01-01", n * 7, 7, dtype="datetime64[D]")[:n],
        price,
        units,
        np.full(n, cost),
        np.ones(n, dtype=bool),
        covariates={"promo": promo, "temperature": temperature},
    )
    spec = ModelSpec(form="auto", covariates=("promo", "temperature"))
    fit, refused = _fit_or_refusal(history, spec)
    latest = {"promo": float(promo[-1]), "temperature": float(temperature[-1])}
    if fit is not None:
        latest = {k: float(v) for k, v in fit.variable_latest.items() if k in latest}
    p0 = float(listed[-1])

    def profit(p: FloatArray) -> FloatArray:
        # The shock's mean factor exp(sd**2 / 2) is common to every price: ratios ignore it.
        q = truth.units(p, latest["promo"], latest["temperature"])
        result: FloatArray = (p - cost) * q
        return result

    share = float(truth.units(np.array(p0), latest["promo"], latest["temperature"])) / truth.market
    return Case(
        generator="market-share, near best" if near_best else "market-share",
        sku=sku,
        fit=fit,
        refused=refused,
        unit_cost=cost,
        current_price=p0,
        constraints=PriceConstraints(
            min_price=round(max(1.10 * cost, 0.75 * p0), 2), max_price=round(1.35 * p0, 2)
        ),
        price_range=fit.price_range if fit is not None else _observed(history),
        true_profit=profit,
        true_elasticity=-truth.beta * p0 * (1.0 - share),
        prior=MARKET_PRIOR,
    )


def market_share_cases(
    seed: int, n_products: int = 30, *, near_best: bool = False
) -> Iterator[Case]:
    rng = np.random.default_rng([seed, 2026, int(near_best)])
    yield from with_shrinkage([_share_case(rng, seed, i, near_best) for i in range(n_products)])
