"""Deciding over the estimate's distribution: expected, cautious, the value of knowing and
the do-no-harm check.

The library computes the expected and the 10th-percentile profit in closed form
(lognormal mean; normal first partial moment; quantile of a monotone function of a
normal). These tests check it against brute force that knows none of that: coefficient
vectors drawn from N(params, cov) with numpy, profit averaged (or its 10th percentile
taken) draw by draw on a fine price grid, and the best grid price compared with the
library's price to the grid's resolution.
"""

from __future__ import annotations

import dataclasses
from functools import cache

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from models import (
    DemandCurve,
    DemandFit,
    ModelSpec,
    PriceConstraints,
    UnboundedObjectiveError,
    fit_demand,
    optimal_price,
)
from models.scenario import simulate_product

BRUTE_DRAWS = 200_000
GRID_STEP = 0.002  # relative spacing of the brute-force price grid
COST_SHARE = 0.5


@cache
def noisy_fit(form: str) -> tuple[DemandFit, float]:
    """A fit with a wide own-price interval (little price variation, much noise)."""
    product = simulate_product(
        11, form=form, elasticity=-2.2, n_periods=40, price_noise=0.02, noise_sd=None
    )
    fit = fit_demand(product.history, ModelSpec(form=form, covariates=("promo",)))
    return fit, COST_SHARE * product.current_price


def brute_force(fit: DemandFit, cost: float, low: float, high: float, rule: str) -> FloatGrid:
    """Mean (or 10th percentile) of profit over drawn coefficients, on a price grid."""
    rng = np.random.default_rng(2024)
    draws = rng.multivariate_normal(fit.params, fit.cov, size=BRUTE_DRAWS, method="eigh")
    curve = DemandCurve.from_fit(fit, params=draws)
    prices = low * (high / low) ** np.linspace(0.0, 1.0, int(np.log(high / low) / GRID_STEP) + 1)
    scores = np.empty(prices.size)
    for i in range(0, prices.size, 50):
        block = curve.objective(prices[None, i : i + 50], cost)
        scores[i : i + 50] = (
            block.mean(axis=0) if rule == "expected" else np.quantile(block, 0.10, axis=0)
        )
    return FloatGrid(prices, scores)


@dataclasses.dataclass(frozen=True)
class FloatGrid:
    prices: np.ndarray
    scores: np.ndarray

    @property
    def best(self) -> float:
        return float(self.prices[np.argmax(self.scores)])


def limits(fit: DemandFit) -> PriceConstraints:
    low, high = fit.price_range
    return PriceConstraints(min_price=0.6 * low, max_price=1.6 * high, allow_extrapolation=True)


@pytest.mark.slow
@pytest.mark.parametrize("form", ["linear", "log-log", "semi-log"])
@pytest.mark.parametrize("rule", ["expected", "cautious"])
def test_rule_agrees_with_brute_force_monte_carlo(form: str, rule: str) -> None:
    fit, cost = noisy_fit(form)
    constraints = limits(fit)
    found = optimal_price(fit, unit_cost=cost, constraints=constraints, decide_by=rule)
    low, high = found.feasible_range
    assert high is not None
    grid = brute_force(fit, cost, low, high, rule)
    # Brute force over a grid of relative spacing GRID_STEP: agreement to the grid's
    # resolution (two steps: one for the grid, one for Monte Carlo error of 2e5 draws).
    assert found.recommended.price == pytest.approx(grid.best, rel=2 * GRID_STEP)
    point = optimal_price(fit, unit_cost=cost, constraints=constraints, decide_by="point")
    if form == "linear" and rule == "expected":
        # Mean units are linear in the coefficients (the floor at zero is far away), so
        # the expected-profit price is the point price: linearity of expectation.
        assert found.recommended.price == pytest.approx(point.recommended.price, rel=1e-6)
    elif rule == "cautious":
        # The brute force distinguishes the cautious price from the point price: the
        # check above is not satisfied by returning the point price.
        assert abs(grid.best / point.recommended.price - 1.0) > 4 * GRID_STEP


@pytest.mark.slow
@pytest.mark.parametrize("form", ["log-log", "semi-log", "linear"])
def test_value_of_knowing_agrees_with_monte_carlo(form: str) -> None:
    fit, cost = noisy_fit(form)
    found = optimal_price(fit, unit_cost=cost, constraints=limits(fit), decide_by="expected")
    low, high = found.feasible_range
    assert high is not None and found.decision_figures is not None
    rng = np.random.default_rng(7)
    draws = rng.multivariate_normal(fit.params, fit.cov, size=20_000, method="eigh")
    curve = DemandCurve.from_fit(fit, params=draws)
    prices = low * (high / low) ** np.linspace(0.0, 1.0, 1201)
    best = curve.objective(prices[None, :], cost).max(axis=1)
    at_chosen = curve.objective(found.recommended.price, cost)[:, 0]
    monte_carlo = float(np.mean(best - at_chosen))
    # E[max_p f(p | theta) - f(chosen | theta)] by Monte Carlo (definition of the expected
    # value of perfect information); 2e4 draws and a 1201-point grid: agreement to 3%.
    assert found.decision_figures.value_of_knowing == pytest.approx(monte_carlo, rel=0.03)
    assert found.decision_figures.value_of_knowing > 0.0


def test_point_rule_keeps_the_plug_in_optimum() -> None:
    price = np.linspace(8.0, 16.0, 30)
    periods = np.arange("2024-01-01", 30 * 7, 7, dtype="datetime64[D]")
    from models import History

    units = 1000.0 * price**-4.0
    h = History("TEA-9", periods, price, units, np.full(30, np.nan), np.ones(30, bool))
    fit = fit_demand(h, ModelSpec(form="log-log"))
    found = optimal_price(fit, unit_cost=9.0, decide_by="point")
    # Constant elasticity -4 and cost 9: the markup rule p = c * e / (1 + e) = 12
    # (Lerner index; any microeconomics text, from memory).
    assert found.recommended.price == pytest.approx(12.0, rel=1e-9)
    assert found.decision_figures is not None and found.decision_figures.decide_by == "point"
    # An exact fit leaves no uncertainty: nothing to gain from knowing more.
    assert found.decision_figures.value_of_knowing == pytest.approx(0.0, abs=1e-6)


def test_no_harm_check_keeps_the_current_price_when_the_move_is_unclear() -> None:
    fit, cost = noisy_fit("log-log")
    constraints = limits(fit)
    point = optimal_price(fit, unit_cost=cost, constraints=constraints, decide_by="point")
    assert point.decision_figures is not None
    # A current price just off the point optimum: moving gains little and wins in about
    # half the distribution, so the check holds the current price.
    current = point.recommended.price * 1.01
    held = optimal_price(
        fit,
        unit_cost=cost,
        current_price=current,
        constraints=constraints,
        decide_by="expected",
        no_harm_check=True,
    )
    assert held.recommended.price == current
    assert held.decision_figures is not None and held.decision_figures.held_current
    assert held.binding_constraints == ("no_harm_check",)
    # Far from the optimum the move wins in (nearly) every outcome and goes ahead.
    far = optimal_price(
        fit,
        unit_cost=cost,
        current_price=point.recommended.price * 0.7,
        constraints=constraints,
        decide_by="expected",
        no_harm_check=True,
    )
    assert far.decision_figures is not None and not far.decision_figures.held_current
    assert (
        far.decision_figures.chance_of_gain is not None
        and far.decision_figures.chance_of_gain >= 0.8
    )
    assert far.recommended.price > point.recommended.price * 0.8


def centred_fit() -> tuple[DemandFit, float]:
    """A log-log fit whose prices are centred (in logs) on the current price, so that the
    spread of predicted demand is smallest at the current price."""
    rng = np.random.default_rng(5)
    n = 60
    price = 10.0 * np.exp(rng.uniform(-0.08, 0.08, n))
    price *= 10.0 / np.exp(np.mean(np.log(price)))
    units = np.exp(np.log(400.0) - 2.0 * np.log(price / 10.0) + 0.2 * rng.standard_normal(n))
    periods = np.arange("2024-01-01", n * 7, 7, dtype="datetime64[D]")
    from models import History

    h = History("TEA-5", periods, price, units, np.full(n, np.nan), np.ones(n, bool))
    # Classical standard errors: Var(a + b ln p) = s2 (1/n + (ln p - mean ln p)**2 / Sxx),
    # smallest at the mean log price (simple regression; any econometrics text, from memory).
    return fit_demand(h, ModelSpec(form="log-log", standard_errors="classical")), 10.0


CENTRED = centred_fit()


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    small=st.floats(0.05, 4.0),
    factor=st.floats(1.2, 6.0),
    cost_share=st.floats(0.3, 0.7),
)
def test_cautious_price_moves_toward_the_current_price_as_uncertainty_grows(
    small: float, factor: float, cost_share: float
) -> None:
    fit, current = CENTRED
    cost = cost_share * current
    constraints = PriceConstraints(min_price=cost * 1.01, max_price=60.0, allow_extrapolation=True)

    def cautious(scale: float) -> float:
        cov = fit.cov * scale
        scaled = dataclasses.replace(fit, covariance=tuple(tuple(map(float, r)) for r in cov))
        found = optimal_price(
            scaled,
            unit_cost=cost,
            current_price=current,
            constraints=constraints,
            decide_by="cautious",
        )
        return found.recommended.price

    near, far = cautious(small), cautious(small * factor)
    # Larger covariance, larger penalty on prices where predicted demand spreads more,
    # i.e. away from the centre of the data (the current price): the distance in logs
    # does not grow (tolerance: the optimiser's relative precision).
    assert abs(np.log(far / current)) <= abs(np.log(near / current)) + 1e-7
    if abs(np.log(near / current)) > 0.05:  # away from the current price it really moves
        assert abs(np.log(far / current)) < abs(np.log(near / current)) - 1e-6


@pytest.mark.parametrize("form", ["linear", "log-log", "semi-log"])
def test_expected_without_an_upper_price_limit_has_no_finite_optimum(form: str) -> None:
    fit, cost = noisy_fit(form)
    free = PriceConstraints(allow_extrapolation=True)
    # With any spread in the own-price coefficient the mean of exp(eta) grows like
    # exp(Var(b) g(p)**2 / 2) (lognormal mean, Aitchison and Brown 1957), and a floored
    # normal linearly: the mean profit is unbounded above, so the library says so.
    with pytest.raises(UnboundedObjectiveError) as raised:
        optimal_price(fit, unit_cost=cost, constraints=free, decide_by="expected")
    assert raised.value.direction == "above"
    # The cautious criterion stays bounded; outcomes whose own best price is unbounded
    # (log-log draws with b > -1 carry weight here) leave the value of knowing undefined.
    cautious = optimal_price(fit, unit_cost=cost, constraints=free, decide_by="cautious")
    assert cautious.decision_figures is not None
    if form == "log-log":
        assert cautious.decision_figures.value_of_knowing is None


@pytest.mark.parametrize("rule", ["point", "expected", "cautious"])
def test_leaving_the_figures_out_changes_no_price(rule: str) -> None:
    # decision_figures=False skips only the report: the price is the same to the last bit,
    # with and without the do-no-harm check (which still works its figures out).
    fit, cost = noisy_fit("log-log")
    current = 1.05 * cost / COST_SHARE
    for check in (False, True):
        full, bare = (
            optimal_price(
                fit,
                unit_cost=cost,
                current_price=current,
                constraints=limits(fit),
                decide_by=rule,
                no_harm_check=check,
                decision_figures=figures,
            )
            for figures in (True, False)
        )
        assert bare.recommended.price == full.recommended.price
        assert bare.binding_constraints == full.binding_constraints
        assert full.decision_figures is not None
        assert (bare.decision_figures is None) == (not check)
