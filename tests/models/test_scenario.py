"""The invented tea shop: determinism, shape, plausibility, traps, and recovery of the truth.

All data here is simulated from known parameters (recover-the-truth tests); the statistical
checks compare estimates with those parameters using the standard errors of statsmodels.
"""

from __future__ import annotations

import doctest

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import stats

import models.scenario as scenario
from models._typing import FloatArray
from models.scenario import (
    COVARIATES,
    FAMILIES,
    LOG_COVARIATES,
    Catalogue,
    DemandForm,
    ScenarioProduct,
    generate_catalogue,
    holiday_flags,
    simulate_product,
    weekly_periods,
)


@pytest.fixture(scope="module")
def catalogue() -> Catalogue:
    return generate_catalogue(7)


def regular_products(cat: Catalogue) -> list[ScenarioProduct]:
    return [p for p in cat.products if p.truth.trap is None]


def design(product: ScenarioProduct) -> FloatArray:
    """The correctly specified regressors: constant, own price, covariates, cross prices."""
    history, truth = product.history, product.truth

    def price_term(values: FloatArray) -> FloatArray:
        return np.log(values) if truth.prices_in_logs else values

    columns = [np.ones(history.n_periods), price_term(history.price)]
    for name in COVARIATES:
        values = history.covariates[name]
        columns.append(np.log(values) if name in truth.log_covariates else values)
    columns += [price_term(history.cross_prices[sku]) for sku in truth.cross_price_coefs]
    return np.column_stack(columns)


def true_coefficients(product: ScenarioProduct) -> FloatArray:
    truth = product.truth
    values = [truth.intercept, truth.price_coef]
    values += [truth.covariate_coefs[name] for name in COVARIATES]
    values += list(truth.cross_price_coefs.values())
    return np.array(values)


def correct_fit(product: ScenarioProduct) -> tuple[FloatArray, FloatArray]:
    """Estimates and standard errors of the data-generating form, stockout weeks excluded."""
    keep = product.history.in_stock
    x, units = design(product)[keep], product.history.units[keep]
    if product.truth.form == "poisson":
        result = sm.GLM(units, x, family=sm.families.Poisson()).fit()
    elif product.truth.form == "linear":
        result = sm.OLS(units, x).fit()
    else:
        result = sm.OLS(np.log(units), x).fit()
    return np.asarray(result.params), np.asarray(result.bse)


# --------------------------------------------------------------------------- determinism


def all_arrays(cat: Catalogue) -> list[np.ndarray]:
    arrays: list[np.ndarray] = [cat.periods]
    for p in cat.products:
        h = p.history
        arrays += [h.periods, h.price, h.units, h.unit_cost, h.in_stock, p.regular_price]
        arrays += [p.demand, p.mean_units]
        arrays += [h.covariates[k] for k in sorted(h.covariates)]
        arrays += [h.cross_prices[k] for k in sorted(h.cross_prices)]
    return arrays


def test_same_seed_gives_identical_catalogue(catalogue: Catalogue) -> None:
    again = generate_catalogue(7)
    for left, right in zip(all_arrays(catalogue), all_arrays(again), strict=True):
        np.testing.assert_array_equal(left, right)
    assert [p.truth for p in catalogue.products] == [p.truth for p in again.products]


def test_different_seed_gives_different_numbers(catalogue: Catalogue) -> None:
    other = generate_catalogue(8)
    assert [p.sku for p in other.products] == [p.sku for p in catalogue.products]
    for mine, theirs in zip(catalogue.products, other.products, strict=True):
        assert not np.array_equal(mine.history.units, theirs.history.units)
        assert mine.truth.price_coef != theirs.truth.price_coef


def test_simulate_product_is_deterministic_for_a_seed() -> None:
    first, second = simulate_product(5), simulate_product(np.random.default_rng(5))
    np.testing.assert_array_equal(first.history.units, second.history.units)
    np.testing.assert_array_equal(first.history.price, second.history.price)
    assert not np.array_equal(first.history.units, simulate_product(6).history.units)


# --------------------------------------------------------------------------- layout


def test_catalogue_shape(catalogue: Catalogue) -> None:
    assert catalogue.seed == 7
    assert catalogue.families == FAMILIES == ("green", "black", "oolong", "herbal", "gift-sets")
    assert [len(catalogue.in_family(f)) for f in FAMILIES] == [8, 8, 8, 8, 8]
    skus = [p.sku for p in catalogue.products]
    assert skus == [f"TEA-{i:03d}" for i in range(1, 41)]
    assert len({p.name for p in catalogue.products}) == 40
    assert catalogue.periods.shape == (104,)
    assert catalogue.periods[0] == np.datetime64("2024-01-01")
    assert set(np.diff(catalogue.periods).astype(int)) == {7}
    # 2024-01-01 was a Monday, so every period start is one.
    assert np.all((catalogue.periods - catalogue.periods[0]).astype(int) % 7 == 0)
    for p in catalogue.products:
        expected = 8 if p.truth.trap == "short-history" else 104
        assert p.history.n_periods == expected
        assert p.currency == "EUR"
        assert set(p.history.covariates) == set(COVARIATES)
        np.testing.assert_array_equal(p.history.periods, catalogue.periods[-expected:])


def test_smaller_catalogue_keeps_the_layout() -> None:
    cat = generate_catalogue(3, n_products=17, n_periods=30, start="2025-03-03")
    assert [len(cat.in_family(f)) for f in FAMILIES] == [4, 4, 3, 3, 3]
    assert cat.periods[-1] == np.datetime64("2025-03-03") + 7 * 29
    assert sorted(p.truth.trap or "" for p in cat.products)[-3:] == [
        "endogenous-price",
        "flat-price",
        "short-history",
    ]


def test_forms_are_mostly_log_log_with_every_other_form_present(catalogue: Catalogue) -> None:
    forms = [p.truth.form for p in catalogue.products]
    counts = {form: forms.count(form) for form in set(forms)}
    assert counts == {"log-log": 26, "semi-log": 5, "linear": 4, "poisson": 5}
    for p in catalogue.products:
        expected_noise = {"log-log": "lognormal", "semi-log": "lognormal"}.get(
            p.truth.form, "normal" if p.truth.form == "linear" else "poisson"
        )
        assert p.truth.noise == expected_noise
        assert (p.truth.noise_sd == 0.0) == (p.truth.form == "poisson")


# --------------------------------------------------------------------------- values


def test_prices_costs_and_bounds_are_plausible(catalogue: Catalogue) -> None:
    for p in catalogue.products:
        h = p.history
        assert np.all(h.price > 0) and np.all(h.unit_cost > 0)
        assert 4.0 <= p.truth.base_price <= 40.0
        share = h.unit_cost / p.truth.base_price
        assert np.all((share > 0.3) & (share < 0.8)), p.sku
        assert p.current_price == p.regular_price[-1]
        assert p.unit_cost == h.unit_cost[-1]
        assert p.unit_cost < p.min_price < p.current_price < p.max_price
        np.testing.assert_array_equal(h.price, np.round(h.price, 2))


def test_units_are_whole_and_censored_in_stockout_weeks(catalogue: Catalogue) -> None:
    stockouts = 0
    for p in catalogue.products:
        h = p.history
        assert np.all(h.units >= 0)
        np.testing.assert_array_equal(h.units, np.round(h.units))
        assert np.all(h.units <= p.demand)
        np.testing.assert_array_equal(h.units[h.in_stock], p.demand[h.in_stock])
        short = ~h.in_stock & (p.demand > 0)
        assert np.all(h.units[short] < p.demand[short])
        stockouts += int((~h.in_stock).sum())
    assert stockouts >= 20


def test_low_volume_products_have_zero_sale_weeks(catalogue: Catalogue) -> None:
    zero_weeks = {
        p.sku: int(np.sum((p.history.units == 0) & p.history.in_stock)) for p in catalogue.products
    }
    with_zeros = [sku for sku, count in zero_weeks.items() if count > 0]
    assert len(with_zeros) >= 3
    assert all(catalogue.product(sku).truth.form == "poisson" for sku in with_zeros)


def test_regular_volumes_keep_rounding_harmless(catalogue: Catalogue) -> None:
    for p in regular_products(catalogue):
        if p.truth.form != "poisson":
            assert p.truth.base_units >= 20
            assert np.all(p.demand >= 5), p.sku


def test_promotion_weeks_are_cheaper_than_the_regular_price(catalogue: Catalogue) -> None:
    for p in catalogue.products:
        promo = p.history.covariates["promo"] == 1
        if p.truth.trap != "short-history":
            assert 0 < promo.sum() < 30, p.sku
        if p.truth.trap is None:
            ratio = p.history.price[promo] / p.regular_price[promo]
            assert np.all(ratio < 1.0) and np.mean(ratio) < 0.92, p.sku


def test_covariates_follow_their_conventions(catalogue: Catalogue) -> None:
    assert LOG_COVARIATES == ("rival_price", "ad_spend")
    for p in catalogue.products:
        cov = p.history.covariates
        assert np.all((cov["rival_price"] > 0.75) & (cov["rival_price"] < 1.3))
        assert np.all(cov["ad_spend"] > 0)  # enters as a log, so never zero
        assert set(np.unique(cov["promo"])) <= {0.0, 1.0}
        coefs = p.truth.covariate_coefs
        assert all(coefs[name] > 0 for name in COVARIATES), p.sku
        assert p.truth.log_covariates == LOG_COVARIATES
    rival = catalogue.products[0].history.covariates["rival_price"]
    assert abs(float(np.mean(np.log(rival)))) < 0.1 and np.std(rival) > 0.01


def test_holiday_weeks_are_late_december_and_the_spring_gift_week() -> None:
    periods = weekly_periods("2024-01-01", 104)
    flagged = periods[holiday_flags(periods) == 1].astype(str).tolist()
    assert flagged == [
        "2024-05-06",
        "2024-12-16",
        "2024-12-23",
        "2024-12-30",
        "2025-05-12",
        "2025-12-15",
        "2025-12-22",
    ]


def test_gift_sets_gain_most_in_holiday_weeks(catalogue: Catalogue) -> None:
    def relative_lift(p: ScenarioProduct) -> float:
        # Linear coefficients are in units; state them relative to the base volume.
        scale = p.truth.base_units if p.truth.form == "linear" else 1.0
        return p.truth.covariate_coefs["holiday"] / scale

    lift = {f: [relative_lift(p) for p in catalogue.in_family(f)] for f in FAMILIES}
    assert min(lift["gift-sets"]) > max(max(v) for f, v in lift.items() if f != "gift-sets")


# --------------------------------------------------------------------------- cross prices


def test_cross_prices_point_at_siblings(catalogue: Catalogue) -> None:
    traps = {p.sku for p in catalogue.products if p.truth.trap is not None}
    signs = []
    for p in catalogue.products:
        keys = set(p.history.cross_prices)
        assert keys == set(p.truth.cross_price_coefs) == set(p.truth.cross_price_reference)
        assert 1 <= len(keys) <= 2, p.sku
        for sku in keys:
            sibling = catalogue.product(sku)
            assert sibling.family == p.family and sku != p.sku and sku not in traps
            n = p.history.n_periods
            np.testing.assert_array_equal(p.history.cross_prices[sku], sibling.history.price[-n:])
            signs.append(np.sign(p.truth.cross_price_coefs[sku]))
    assert signs.count(-1) == 2  # the matcha / whisk complement pair, both ways
    assert signs.count(1) >= 40


def test_matcha_and_whisk_are_complements(catalogue: Catalogue) -> None:
    matcha, whisk = catalogue.product("TEA-002"), catalogue.product("TEA-003")
    assert "Matcha" in matcha.name and "whisk" in whisk.name
    assert matcha.truth.cross_price_coefs[whisk.sku] < 0
    assert whisk.truth.cross_price_coefs[matcha.sku] < 0


# --------------------------------------------------------------------------- true equations


def test_base_point_reproduces_base_units_and_elasticity(catalogue: Catalogue) -> None:
    for p in catalogue.products:
        t = p.truth
        eta = float(t.linear_predictor(t.base_price))
        level = eta if t.form == "linear" else float(np.exp(eta))
        assert level == pytest.approx(t.base_units, rel=1e-12)
        assert float(t.own_price_elasticity(t.base_price)) == pytest.approx(t.elasticity_at_base)
        low = -2.0 if t.form == "linear" else -3.5
        assert low <= t.elasticity_at_base <= -1.2


def test_native_coefficients_match_the_stated_elasticity() -> None:
    semi = simulate_product(0, form="semi-log", elasticity=-2.5, base_price=8.0).truth
    assert semi.price_coef == pytest.approx(-2.5 / 8.0)
    linear = simulate_product(0, form="linear", elasticity=-1.5, base_units=120.0).truth
    assert linear.price_coef == pytest.approx(-1.5 * 120.0 / 10.0)
    assert linear.covariate_coefs["promo"] == pytest.approx(0.2 * 120.0)


def test_history_follows_the_equation_exactly_without_noise() -> None:
    for form in ("log-log", "semi-log", "linear"):
        p = simulate_product(9, form=form, noise_sd=0.0, cross_effects={"SIB-1": 0.3})
        eta = p.truth.linear_predictor(
            p.history.price, covariates=p.history.covariates, cross_prices=p.history.cross_prices
        )
        observed = p.history.units if form == "linear" else np.log(p.history.units)
        np.testing.assert_allclose(observed, eta, rtol=0, atol=1e-10)


def test_expected_units_is_the_mean_of_the_noise_model() -> None:
    # Lognormal mean exp(mu + s^2 / 2): a closed-form result.
    p = simulate_product(2, noise_sd=0.25)
    ratio = p.mean_units / np.exp(
        p.truth.linear_predictor(
            p.history.price, covariates=p.history.covariates, cross_prices=p.history.cross_prices
        )
    )
    np.testing.assert_allclose(ratio, np.exp(0.25**2 / 2), rtol=1e-12)


# --------------------------------------------------------------------------- traps


def trap(cat: Catalogue, kind: str) -> ScenarioProduct:
    (product,) = [p for p in cat.products if p.truth.trap == kind]
    return product


def test_flat_price_trap_barely_moves(catalogue: Catalogue) -> None:
    flat = trap(catalogue, "flat-price")
    cv = np.std(flat.history.price) / np.mean(flat.history.price)
    assert 0 < cv < 0.01
    others = [
        np.std(p.history.price) / np.mean(p.history.price) for p in regular_products(catalogue)
    ]
    assert min(others) > 0.015


def test_short_history_trap_has_eight_weeks(catalogue: Catalogue) -> None:
    new = trap(catalogue, "short-history")
    assert new.history.n_periods == 8
    assert all(arr.shape == (8,) for arr in new.history.cross_prices.values())


def test_endogenous_price_trap_gives_wrong_signed_ols_and_iv_repairs_it(
    catalogue: Catalogue,
) -> None:
    p = trap(catalogue, "endogenous-price")
    assert p.truth.endogeneity > 0 and p.truth.price_coef < -1
    x, y = design(p), np.log(p.history.units)
    ols = sm.OLS(y, x).fit()
    assert ols.params[1] > 0 and ols.tvalues[1] > 2
    # Two-stage least squares with log unit cost as the instrument for log price.
    z = x.copy()
    z[:, 1] = np.log(p.history.unit_cost)
    first = sm.OLS(x[:, 1], z).fit()
    # First-stage F above 10: the rule of thumb of Staiger & Stock (1997), cited from memory.
    assert first.tvalues[1] ** 2 > 10
    x_hat = x.copy()
    x_hat[:, 1] = first.fittedvalues
    iv_estimate = np.linalg.lstsq(x_hat, y, rcond=None)[0][1]
    assert iv_estimate < 0
    assert abs(iv_estimate - p.truth.price_coef) < abs(ols.params[1] - p.truth.price_coef)


# --------------------------------------------------------------------------- recover the truth


def test_log_log_ols_recovers_the_elasticity() -> None:
    p = simulate_product(2024, form="log-log", elasticity=-2.4, cross_effects={"SIB-1": 0.5})
    result = sm.OLS(np.log(p.history.units), design(p)).fit()
    z = (result.params - true_coefficients(p)) / result.bse
    assert abs(z[1]) < 3.5
    assert np.all(np.abs(z) < 4)


def test_correct_regressions_cover_the_truth_at_the_nominal_rate() -> None:
    # Exact normal linear model: the 95% t interval covers the truth with probability 0.95.
    # 200 seeds give a binomial standard deviation of about 1.5 points.
    covered = []
    for seed in range(200):
        p = simulate_product(seed, cross_effects={"SIB-1": 0.4})
        x, y = design(p), np.log(p.history.units)
        beta, *_ = np.linalg.lstsq(x, y, rcond=None)
        dof = y.size - x.shape[1]
        resid = y - x @ beta
        se = np.sqrt(resid @ resid / dof * np.linalg.inv(x.T @ x)[1, 1])
        half_width = stats.t.ppf(0.975, dof) * se
        covered.append(abs(beta[1] - p.truth.price_coef) <= half_width)
    assert 0.90 <= np.mean(covered) <= 0.99


@pytest.mark.parametrize("form", ["semi-log", "linear", "poisson"])
def test_other_forms_are_recovered_by_their_own_estimator(form: DemandForm) -> None:
    p = simulate_product(17, form=form, elasticity=-1.8, base_units=60.0)
    estimates, errors = correct_fit(p)
    z = (estimates - true_coefficients(p)) / errors
    assert np.all(np.abs(z) < 4), z


def test_catalogue_products_are_recovered_despite_rounding_and_stockouts(
    catalogue: Catalogue,
) -> None:
    z_scores = []
    for p in regular_products(catalogue):
        estimates, errors = correct_fit(p)
        z_scores.append((estimates[1] - p.truth.price_coef) / errors[1])
    z = np.array(z_scores)
    assert np.all(np.abs(z) < 4.5), z
    assert abs(z.mean()) < 0.5 and 0.6 < z.std() < 1.4


def test_stockouts_and_rounding_are_optional_in_simulate_product() -> None:
    p = simulate_product(4, stockout_rate=0.2, round_units=True, base_units=30.0)
    h = p.history
    assert 5 <= (~h.in_stock).sum() <= 40
    np.testing.assert_array_equal(h.units, np.round(h.units))
    assert np.all(h.units[~h.in_stock] < p.demand[~h.in_stock])


def test_endogeneity_in_simulate_product_biases_ols_upwards() -> None:
    estimates = []
    for seed in range(30):
        p = simulate_product(seed, elasticity=-2.0, endogeneity=0.1, noise_sd=0.3)
        estimates.append(sm.OLS(np.log(p.history.units), design(p)).fit().params[1])
    assert np.mean(estimates) > -1.5


# --------------------------------------------------------------------------- inputs


def test_bad_inputs_are_refused() -> None:
    with pytest.raises(ValueError, match="Monday"):
        generate_catalogue(start="2024-01-02")
    with pytest.raises(ValueError, match="n_products"):
        generate_catalogue(n_products=10)
    with pytest.raises(ValueError, match="n_periods"):
        generate_catalogue(n_periods=12)
    with pytest.raises(ValueError, match="noise_sd"):
        simulate_product(1, form="poisson", noise_sd=0.2)
    with pytest.raises(ValueError, match="endogeneity"):
        simulate_product(1, form="poisson", endogeneity=0.1)
    with pytest.raises(ValueError, match="form"):
        simulate_product(1, form="cubic")  # type: ignore[arg-type]
    with pytest.raises(KeyError):
        generate_catalogue(n_products=15).product("TEA-999")


def test_docstring_examples_run() -> None:
    outcome = doctest.testmod(scenario, optionflags=doctest.NORMALIZE_WHITESPACE)
    assert outcome.attempted >= 10 and outcome.failed == 0
