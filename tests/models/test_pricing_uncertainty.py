"""Coefficient uncertainty carried into the recommended price.

The vectorised per-draw optimisation is checked against optimising each drawn fit on
its own through the public functions (an independent, scalar path).
"""

from __future__ import annotations

import json
from functools import cache

import numpy as np
import pytest

from models import (
    DemandFit,
    InfeasibleConstraintsError,
    ModelSpec,
    PriceConstraints,
    fit_demand,
    optimal_family_prices,
    optimal_price,
    simulate_product,
)
from models.pricing.inputs import coefficient_draws
from models.scenario import COVARIATES, LOG_COVARIATES
from tests.plugins.pricing_cases import COSTS, expected_units, three_mixed, two_linear, with_params

N_DRAWS = 40


@cache
def noisy_fit(form: str) -> tuple[DemandFit, float, float]:
    product = simulate_product(5, form=form, elasticity=-2.0, sku=f"UNC-{form}")
    spec = ModelSpec(form=form, covariates=COVARIATES, log_covariates=LOG_COVARIATES)
    return fit_demand(product.history, spec), product.unit_cost, product.current_price


def quantiles(values: np.ndarray) -> tuple[float, float]:
    low, high = np.quantile(values, [0.05, 0.95])
    return float(low), float(high)


@pytest.mark.parametrize("form", ["log-log", "semi-log", "linear", "poisson"])
@pytest.mark.parametrize(
    "constraints",
    [
        PriceConstraints(),
        PriceConstraints(max_change_pct=8.0, max_units=110.0),
        PriceConstraints(price_endings=(0.49, 0.99), min_margin_pct=40.0),
    ],
    ids=["guard", "change-and-stock", "endings-and-margin"],
)
def test_draws_match_optimising_each_drawn_fit(form: str, constraints: PriceConstraints) -> None:
    fit, cost, current = noisy_fit(form)
    result = optimal_price(
        fit,
        unit_cost=cost,
        current_price=current,
        constraints=constraints,
        uncertainty_draws=N_DRAWS,
        seed=3,
    )
    u = result.uncertainty
    assert u is not None and u.draws == N_DRAWS and u.level == 0.9
    draws = coefficient_draws(fit, N_DRAWS, np.random.default_rng(3))
    assert draws is not None
    optima, gains, profits = [], [], []
    infeasible = 0
    rec = result.recommended.price
    for theta in draws:
        drawn = with_params(fit, theta)
        try:
            optima.append(
                optimal_price(
                    drawn,
                    unit_cost=cost,
                    current_price=current,
                    constraints=constraints,
                    allow_wrong_sign=True,
                ).recommended.price
            )
        except InfeasibleConstraintsError:  # this draw's demand cannot meet the stock limit
            infeasible += 1
        units_rec, units_cur = expected_units(drawn, np.array([rec, current]))
        profits.append((rec - cost) * units_rec)
        gains.append((rec - cost) * units_rec - (current - cost) * units_cur)
    assert u.n_infeasible == infeasible and u.n_used == N_DRAWS - infeasible
    assert u.price_interval == pytest.approx(quantiles(np.array(optima)), rel=1e-7)
    assert u.profit_interval == pytest.approx(quantiles(np.array(profits)), rel=1e-9)
    assert u.prob_better_than_current == pytest.approx(np.mean(np.array(gains) > 0))
    json.dumps(result.to_dict(), allow_nan=False)


def test_draws_are_seeded() -> None:
    fit, cost, current = noisy_fit("log-log")
    first = optimal_price(fit, unit_cost=cost, current_price=current, uncertainty_draws=50, seed=1)
    again = optimal_price(fit, unit_cost=cost, current_price=current, uncertainty_draws=50, seed=1)
    other = optimal_price(fit, unit_cost=cost, current_price=current, uncertainty_draws=50, seed=2)
    assert first.uncertainty == again.uncertainty
    assert first.uncertainty != other.uncertainty


def test_recommendation_equal_to_current_is_never_better() -> None:
    fit, cost, _ = noisy_fit("poisson")
    point = optimal_price(fit, unit_cost=cost)
    same = optimal_price(
        fit, unit_cost=cost, current_price=point.recommended.price, uncertainty_draws=30
    )
    assert same.uncertainty is not None and same.uncertainty.prob_better_than_current == 0.0


def test_weakly_identified_price_effect_reports_wrong_signed_draws() -> None:
    product = simulate_product(2, elasticity=-0.3, noise_sd=0.4, price_noise=0.01)
    fit = fit_demand(product.history, ModelSpec(covariates=("promo",)))
    own = fit.own_price
    assert own.estimate < 0.0 < own.ci_high  # negative, but not significantly
    result = optimal_price(fit, objective="revenue", uncertainty_draws=200)
    assert result.uncertainty is not None and result.uncertainty.n_wrong_sign > 0
    assert "wrong_sign_draws" in [w.code for w in result.warnings]


def test_unusable_covariance_gives_no_uncertainty_but_an_answer() -> None:
    fit, cost, _ = noisy_fit("log-log")
    data = fit.to_dict()
    data["covariance"][1][1] = None  # an undefined variance (stored NaN)
    broken = DemandFit.from_dict(data)
    result = optimal_price(broken, unit_cost=cost, uncertainty_draws=20)
    assert result.uncertainty is None
    assert result.warnings[-1].code == "uncertainty_unavailable"
    assert result.recommended.price == optimal_price(fit, unit_cost=cost).recommended.price


@pytest.mark.parametrize("family", [two_linear, three_mixed])
def test_family_draws_match_optimising_each_drawn_family(family) -> None:
    base = family()
    # Make the coefficients uncertain: widen the exact fits' covariances.
    fits = {}
    for sku, fit in base.items():
        data = fit.to_dict()
        k = len(data["coefficients"])
        scale = np.abs(fit.params) * 0.02
        data["covariance"] = (np.diag(scale**2)).tolist()
        assert len(data["covariance"]) == k
        fits[sku] = DemandFit.from_dict(data)
    current = {sku: round(float(np.mean(fit.price_range)), 2) for sku, fit in fits.items()}
    costs = {sku: COSTS[sku] for sku in fits}
    n = 12
    result = optimal_family_prices(
        fits, unit_costs=costs, current_prices=current, uncertainty_draws=n, seed=4
    )
    rng = np.random.default_rng(4)
    skus = sorted(fits)
    draws = {sku: coefficient_draws(fits[sku], n, rng) for sku in skus}
    optima = []
    for d in range(n):
        drawn = {sku: with_params(fits[sku], draws[sku][d]) for sku in skus}
        solved = optimal_family_prices(
            drawn, unit_costs=costs, current_prices=current, allow_wrong_sign=True
        )
        optima.append([p.recommended.price for p in solved.products])
    optima_array = np.array(optima)
    for i, product in enumerate(result.products):
        u = product.uncertainty
        assert u is not None and u.n_used == n
        assert u.price_interval == pytest.approx(quantiles(optima_array[:, i]), rel=1e-5)
    assert result.total.profit_interval is not None
    assert result.total.prob_better_than_current is not None
    json.dumps(result.to_dict(), allow_nan=False)


def test_a_small_share_of_wrong_signed_draws_keeps_a_digit() -> None:
    # "1 of 200 draws (0.5%)", never "0%" for a share that is not zero (issue wording).
    from models.pricing.notes import share_text, wrong_sign_draws

    assert share_text(1, 200) == "0.5%" and share_text(1, 2000) == "0.05%"
    assert share_text(0, 200) == "0%" and share_text(30, 200) == "15%"
    one = wrong_sign_draws(1, 200).message
    assert one.startswith("1 of 200 coefficient draws (0.5%) has the wrong sign")
    assert wrong_sign_draws(5, 200).message.startswith("5 of 200 coefficient draws (2.5%) have ")
