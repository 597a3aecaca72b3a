"""Moves calibrated by the catalogue (models.pricing.calibrate).

Checked against closed forms that the code does not use:

* the share of a move is the posterior mean of a normal mean with a N(0, tau^2) prior and a
  N(delta, s^2) observation, ``tau^2 / (tau^2 + s^2)`` times the observation (conjugate normal
  model; e.g. Gelman et al., Bayesian Data Analysis, 3rd ed., section 2.5), compared here with
  the posterior mean by numerical integration;
* the catalogue spread is the method-of-moments estimate of the spread of true effects
  (DerSimonian and Laird, Controlled Clinical Trials 7, 1986, with equal weights), computed
  by hand on a few numbers;
* the spread of the optimal log price of a constant-elasticity curve against the delta method:
  the optimum is ``p* = c b / (1 + b)`` (the markup rule), so ``d ln p* / d b = 1 / b - 1 /
  (1 + b)`` (closed form, from memory of the markup rule).
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
import pytest
from scipy import integrate, stats

from models import (
    CALIBRATION,
    History,
    ModelSpec,
    MoveEvidence,
    PriceConstraints,
    calibrated_limit,
    calibrated_share,
    catalogue_spread,
    fit_demand,
    move_evidence,
    optimal_price,
)
from models.pricing.calibrate import best_prices, optimum_spread
from models.pricing.curve import DemandCurve
from models.pricing.decide import PredictorLaw


@pytest.mark.parametrize(
    ("tau2", "s", "d"), [(0.01, 0.05, 0.12), (0.002, 0.1, -0.2), (0.3, 0.02, 0.4)]
)
def test_the_share_is_the_normal_posterior_mean(tau2: float, s: float, d: float) -> None:
    prior = stats.norm(0.0, math.sqrt(tau2))

    def weight(delta: float) -> float:
        return float(prior.pdf(delta) * stats.norm(delta, s).pdf(d))

    span = 12 * math.sqrt(tau2)
    mass = integrate.quad(weight, -span, span, points=[d], limit=200)[0]
    mean = integrate.quad(lambda x: x * weight(x), -span, span, points=[d], limit=200)[0] / mass
    evidence = MoveEvidence("TEA-X", point_move=d, cautious_move=d, spread=s)
    assert calibrated_share(evidence, tau2) * d == pytest.approx(mean, rel=1e-6, abs=1e-9)


def test_the_catalogue_spread_by_hand() -> None:
    moves = [0.10, -0.20, 0.30, 0.05]
    spreads = [0.05, 0.10, 0.05, 0.20]
    evidence = [
        MoveEvidence(f"P{i}", 9.9, c, s)
        for i, (c, s) in enumerate(zip(moves, spreads, strict=True))
    ]
    # mean(c^2) = (0.01 + 0.04 + 0.09 + 0.0025) / 4; mean(s^2) = (0.0025 + 0.01 + 0.0025 + 0.04) / 4
    assert catalogue_spread(evidence) == pytest.approx((0.1425 - 0.055) / 4, rel=1e-12)
    # Moves no larger than their noise: no spread left, every product keeps its price.
    quiet = [MoveEvidence(e.sku, e.point_move, 0.01, e.spread) for e in evidence]
    assert catalogue_spread(quiet) == 0.0
    kept = calibrated_limit(quiet[0], 0.0, 10.0)
    assert kept is not None and kept.low == kept.high == pytest.approx(10.0)
    # A spread far beyond the noise: the whole point move, and no limit of its own.
    assert calibrated_limit(evidence[0], 1e9, 10.0) is None
    assert catalogue_spread(evidence[:2]) is None  # too few products to tell


def _constant_elasticity_fit(b: float, noise: float, seed: int) -> tuple[object, float]:
    rng = np.random.default_rng(seed)
    n = 104
    price = 10.0 * np.exp(rng.normal(0.0, 0.15, n))
    units = 5000.0 * price**b * np.exp(rng.normal(0.0, noise, n))
    periods = np.arange("2024-01-01", n * 7, 7, dtype="datetime64[D]")[:n]
    history = History("TEA-C", periods, price, units, np.full(n, np.nan), np.ones(n, bool))
    return fit_demand(history, ModelSpec(form="log-log", standard_errors="classical")), 5.0


def test_the_optimum_spread_matches_the_delta_method() -> None:
    fit, cost = _constant_elasticity_fit(-3.0, 0.10, seed=4)
    b, se = fit.own_price.estimate, fit.own_price.std_error
    delta = abs(1.0 / b - 1.0 / (1.0 + b)) * se
    found = optimum_spread(fit, unit_cost=cost, low=5.0, high=12.0)
    assert found is not None
    # 400 draws: the 16th-84th percentile distance of 400 normal draws varies by about 6%,
    # and the delta method is a first-order approximation: within 15%.
    assert found == pytest.approx(delta, rel=0.15)


def test_move_evidence_reads_the_point_and_cautious_choices() -> None:
    fit, cost = _constant_elasticity_fit(-2.5, 0.30, seed=9)
    constraints = PriceConstraints(min_price=6.0, max_price=14.0)
    found = move_evidence(fit, unit_cost=cost, current_price=9.0, constraints=constraints)
    assert found is not None
    for rule, move in (("point", found.point_move), ("cautious", found.cautious_move)):
        price = optimal_price(
            fit, unit_cost=cost, current_price=9.0, constraints=constraints, decide_by=rule
        ).recommended.price
        assert move == pytest.approx(math.log(price / 9.0), abs=1e-12)
    # The calibrated limit reaches the share of the point move, both ways round the price.
    limit = calibrated_limit(found, 0.01, 9.0)
    reach = calibrated_share(found, 0.01) * abs(found.point_move)
    assert limit is not None and limit.name == CALIBRATION
    assert (limit.low, limit.high) == pytest.approx((9.0 * math.exp(-reach), 9.0 * math.exp(reach)))


@pytest.mark.parametrize(
    ("log_price", "linear", "offset", "coefs"),
    [
        (True, False, 9.0, [-3.0, -1.6, -0.8, 0.4]),  # units exp(o) p^b: no peak from b = -1
        (False, False, 5.0, [-0.5, -0.2, -0.05, 0.1]),  # units exp(o + b p)
        (False, True, 400.0, [-30.0, -12.0, -4.0, 2.0]),  # units o + b p, floored at zero
    ],
)
def test_best_prices_are_the_profit_peaks_clipped_to_the_range(
    log_price: bool, linear: bool, offset: float, coefs: list[float]
) -> None:
    # Independent reading: each draw's profit on a fine grid (steps of 0.001 in log price).
    law = PredictorLaw(np.zeros(2), np.eye(2), log_price=log_price, linear=linear)
    draws = np.array([[offset, b] for b in coefs])
    low, high, cost = 4.0, 30.0, 3.0
    grid = np.exp(np.arange(math.log(low), math.log(high), 0.001))
    eta = draws[:, :1] + draws[:, 1:] * law.g(grid)[None, :]
    units = np.maximum(eta, 0.0) if linear else np.exp(eta)
    brute = grid[np.argmax((grid - cost)[None, :] * units, axis=1)]
    found = best_prices(law, draws, cost, low, high)
    assert found == pytest.approx(brute, rel=2e-3)


def test_the_value_of_knowing_looks_past_the_calibration_limit() -> None:
    # The calibration cuts the move short; the value of knowing is still what knowing the
    # curve would be worth among the prices allowed, E[max_p f(p | theta)] - E[f(chosen |
    # theta)] over the business bounds (definition of the expected value of perfect
    # information), checked here by brute-force Monte Carlo over the coefficients.
    fit, cost = _constant_elasticity_fit(-2.5, 0.30, seed=9)
    bounds = PriceConstraints(min_price=6.0, max_price=14.0)
    found = move_evidence(fit, unit_cost=cost, current_price=9.0, constraints=bounds)
    assert found is not None
    limit = calibrated_limit(found, 0.2 * found.spread**2, 9.0)
    assert limit is not None and limit.decision_only
    held = PriceConstraints(min_price=6.0, max_price=14.0, named_limits=(limit,))
    answer = optimal_price(fit, unit_cost=cost, current_price=9.0, constraints=held)
    assert answer.binding_constraints == (CALIBRATION,)
    chosen = answer.recommended.price
    assert answer.decision_figures is not None
    value = answer.decision_figures.value_of_knowing
    rng = np.random.default_rng(5)
    draws = rng.multivariate_normal(fit.params, fit.cov, size=20_000, method="eigh")
    curve = DemandCurve.from_fit(fit, params=draws)
    prices = np.geomspace(6.0, 14.0, 1601)
    best = curve.objective(prices[None, :], cost).max(axis=1)
    brute = float(np.mean(best - curve.objective(chosen, cost)[:, 0]))
    # 2e4 draws and a 1601-point grid: agreement to 3%.
    assert value == pytest.approx(brute, rel=0.03)
    # The same limit as a rule on the allowed prices gives the value within them: smaller.
    as_rule = PriceConstraints(
        min_price=6.0, max_price=14.0, named_limits=(replace(limit, decision_only=False),)
    )
    narrow = optimal_price(fit, unit_cost=cost, current_price=9.0, constraints=as_rule)
    assert narrow.recommended.price == pytest.approx(chosen, rel=1e-12)
    assert narrow.decision_figures is not None
    assert narrow.decision_figures.value_of_knowing < 0.5 * value
    # Likewise the interval of each draw's best price spans the allowed prices, not the
    # calibrated reach (the point move is about -10% with a spread of about 5%).
    drawn = optimal_price(
        fit, unit_cost=cost, current_price=9.0, constraints=held, uncertainty_draws=400
    )
    assert drawn.recommended.price == pytest.approx(chosen, rel=1e-12)
    assert drawn.uncertainty is not None and drawn.uncertainty.price_interval is not None
    assert drawn.uncertainty.price_interval[0] < 0.97 * limit.low
