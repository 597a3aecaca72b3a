"""Closed-form optimal prices reproduced by the optimiser on exact (noise-free) fits.

Each case fits data generated without noise from a textbook demand curve, optimises
numerically, and compares with the published closed form to 1e-6 relative.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from models import DemandCurve, PriceConstraints, optimal_price
from tests.plugins.pricing_cases import exact_fit

REL = 1e-6
OPEN = PriceConstraints(allow_extrapolation=True, min_price=1.0, max_price=200.0)


def constant_elasticity_fit(
    elasticity: float, form: str = "log-log", low: float = 5.0, high: float = 40.0
):
    prices = np.geomspace(low, high, 40)
    return exact_fit("CE", form, prices, 1000.0 * prices**elasticity)


@pytest.mark.parametrize("form", ["log-log", "poisson"])
def test_markup_rule_worked_example(form: str) -> None:
    # Pindyck & Rubinfeld, Microeconomics (7th ed.), Sec. 10.1, eq. (10.2)
    # P = MC / (1 + 1/E_d); worked example E_d = -4, MC = 9 gives P = $12.
    fit = constant_elasticity_fit(-4.0, form, 8.0, 16.0)
    result = optimal_price(fit, unit_cost=9.0)
    assert result.recommended.price == pytest.approx(12.0, rel=REL)
    assert result.unconstrained_price == pytest.approx(12.0, rel=REL)
    assert result.binding_constraints == () and result.optimum == "interior"
    # Lerner index (P - MC) / P = -1/E_d, eq. (10.1): a 25% margin.
    assert result.recommended.margin_pct == pytest.approx(25.0, rel=REL)


@pytest.mark.parametrize(
    ("elasticity", "markup", "source"),
    [
        (-10.0, 1.0 / 0.9, "Pindyck & Rubinfeld Sec. 10.1: supermarket, E_d -10 -> P = MC/0.9"),
        (-5.0, 1.25, "Pindyck & Rubinfeld Sec. 10.1: convenience store, E_d -5 -> 25% above MC"),
        (-3.0, 1.5, "Varian, Intermediate Microeconomics, ch. Monopoly: |e| = 3 -> factor 1.5"),
    ],
)
def test_markup_rule_factors(elasticity: float, markup: float, source: str) -> None:
    fit = constant_elasticity_fit(elasticity)
    cost = 9.0
    result = optimal_price(fit, unit_cost=cost, constraints=OPEN)
    assert result.recommended.price == pytest.approx(cost * markup, rel=REL), source


@pytest.mark.parametrize(
    ("a", "b", "cost", "profit_price", "revenue_price"),
    [
        # Our own numbers, Q = 1500 - 60P with MC = 5, through the closed form
        # p* = (a/b + c)/2 (Pindyck & Rubinfeld, MR = a - 2bQ set equal to MC: "the
        # average of the choke price and the unit cost") = 15; revenue p_R = a/(2b) = 12.5
        # (Fonseca, insightr 2017: P_maxrev = -beta/(2 alpha)).
        (1500.0, 60.0, 5.0, 15.0, 12.5),
        # Derived with the same formulas: a = 100, b = 2, c = 10 -> 30; revenue -> 25.
        (100.0, 2.0, 10.0, 30.0, 25.0),
    ],
)
def test_linear_demand(
    a: float, b: float, cost: float, profit_price: float, revenue_price: float
) -> None:
    prices = np.linspace(0.2 * a / b, 0.8 * a / b, 40)
    fit = exact_fit("LIN", "linear", prices, a - b * prices)
    profit = optimal_price(fit, unit_cost=cost, constraints=OPEN)
    assert profit.recommended.price == pytest.approx(profit_price, rel=REL)
    assert profit.recommended.units == pytest.approx((a - b * cost) / 2.0, rel=REL)
    assert profit.recommended.profit == pytest.approx((a - b * cost) ** 2 / (4.0 * b), rel=REL)
    revenue = optimal_price(fit, objective="revenue", constraints=OPEN)
    assert revenue.recommended.price == pytest.approx(revenue_price, rel=REL)
    assert revenue.unconstrained_price == pytest.approx(revenue_price, rel=REL)
    # Revenue peaks where the point elasticity is -1 (Samuelson & Marks ch. 3, from memory).
    curve = DemandCurve.from_fit(fit)
    assert float(curve.elasticity(revenue.recommended.price)) == pytest.approx(-1.0, rel=REL)


def test_semi_log_demand() -> None:
    # ln q = b0 + b1 p: first-order condition gives p* = c - 1/b1 and p_R = -1/b1
    # (derived by calculus; pricing-oracles "loglin_elasticity", no published source).
    prices = np.linspace(4.0, 20.0, 40)
    fit = exact_fit("SEMI", "semi-log", prices, np.exp(6.0 - 0.25 * prices))
    assert optimal_price(fit, unit_cost=3.0).recommended.price == pytest.approx(7.0, rel=REL)
    revenue = optimal_price(fit, objective="revenue")
    assert revenue.recommended.price == pytest.approx(4.0, rel=REL)


def test_exact_fits_of_every_form_serialise_without_nan() -> None:
    prices = np.linspace(5.0, 20.0, 40)
    cases = {
        "linear": 100.0 - 2.0 * prices,
        "log-log": 1000.0 * prices**-2.0,
        "semi-log": np.exp(5.0 - 0.2 * prices),
        "poisson": 1000.0 * prices**-2.0,
    }
    for form, units in cases.items():
        for errors in ("hc3", "classical", "hac"):
            fit = exact_fit("X", form, prices, units, standard_errors=errors)
            json.dumps(fit.to_dict(), allow_nan=False)
            result = optimal_price(
                fit, unit_cost=2.0, current_price=8.0, uncertainty_draws=20, curve_points=50
            )
            json.dumps(result.to_dict(), allow_nan=False)
            assert result.uncertainty is not None
            low, high = result.uncertainty.price_interval or (np.nan, np.nan)
            # The coefficients are known exactly, so the draws barely move the optimum.
            assert low == pytest.approx(result.recommended.price, rel=1e-6)
            assert high == pytest.approx(result.recommended.price, rel=1e-6)


def test_exact_fit_with_zero_residuals() -> None:
    # Integer prices make the residuals exactly zero: sigma 0, infinite t, no AIC.
    prices = np.arange(5.0, 45.0)
    fit = exact_fit("ZERO", "linear", prices, 100.0 - 2.0 * prices)
    assert fit.quality.aic is None or np.isfinite(fit.quality.aic)
    json.dumps(fit.to_dict(), allow_nan=False)
    result = optimal_price(fit, unit_cost=10.0, uncertainty_draws=10)
    assert result.recommended.price == pytest.approx(30.0, rel=REL)
    json.dumps(result.to_dict(), allow_nan=False)


def test_inelastic_revenue_has_no_interior_optimum() -> None:
    # Revenue A p^(1+e) rises with p when -1 < e < 0 (pricing-oracles ce_revenue, derived;
    # Wikipedia "Markup rule": a firm never prices on the inelastic part of demand).
    fit = constant_elasticity_fit(-0.5, low=8.0, high=16.0)
    result = optimal_price(fit, objective="revenue")
    assert result.unconstrained_price is None
    assert result.recommended.price == pytest.approx(16.0 * 1.1, rel=1e-12)
