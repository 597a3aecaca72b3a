"""Shrinkage of own-price elasticities: the estimator against closed forms and dense algebra."""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest

import models
from models import (
    COVARIATES,
    LOG_COVARIATES,
    ModelSpec,
    elasticities,
    fit_many,
    generate_catalogue,
    normal_means,
    shrink_own_price,
)


def _dense_restricted(
    y: np.ndarray, s: np.ndarray, codes: np.ndarray, tau2: float, omega2: float
) -> float:
    """Restricted log-likelihood from the full covariance matrix (no sums, no shortcuts).

    -1/2 (log|V| + log|1'V^-1 1| + r'V^-1 r), r = y - mu_gls 1 (Harville 1977, eq. for REML
    with a single fixed effect; constants left out).
    """
    z = (codes[:, None] == np.unique(codes)[None, :]).astype(float)
    v = np.diag(s**2 + tau2) + omega2 * z @ z.T
    vi = np.linalg.inv(v)
    one = np.ones(y.size)
    mu = (one @ vi @ y) / (one @ vi @ one)
    r = y - mu
    return float(-0.5 * (np.linalg.slogdet(v)[1] + np.log(one @ vi @ one) + r @ vi @ r))


def _dense_posterior(
    y: np.ndarray, s: np.ndarray, codes: np.ndarray, tau2: float, omega2: float
) -> tuple[np.ndarray, np.ndarray]:
    """Posterior mean and sd of each true value from the joint normal of (theta, y).

    The catalogue mean gets a normal prior of variance 1e6 (near flat), so this is the
    textbook conditional-normal formula, computed by dense solves.
    """
    z = (codes[:, None] == np.unique(codes)[None, :]).astype(float)
    wide = 1e6
    cov_theta = wide * np.ones((y.size, y.size)) + tau2 * np.eye(y.size) + omega2 * z @ z.T
    cov_y = cov_theta + np.diag(s**2)
    mean = cov_theta @ np.linalg.solve(cov_y, y)
    var = cov_theta - cov_theta @ np.linalg.solve(cov_y, cov_theta)
    return mean, np.sqrt(np.diag(var))


def test_equal_standard_errors_follow_the_closed_form() -> None:
    # Closed form: with equal standard errors s, REML gives tau^2 = S / (k - 1) - s^2, where
    # S is the sum of squares about the mean (Morris 1983, JASA 78:47-55, section 2, from
    # memory; it also follows from setting the restricted likelihood's derivative to 0).
    rng = np.random.default_rng(5)
    y = rng.normal(-2.0, 0.8, 12)
    s = np.full(12, 0.3)
    result = normal_means(y, s)
    expected = np.sum((y - y.mean()) ** 2) / 11 - 0.09
    assert result.spread**2 == pytest.approx(expected, rel=1e-6)
    assert result.mean == pytest.approx(y.mean(), rel=1e-12)
    weight = 0.09 / (0.09 + expected)
    assert result.shrunk == pytest.approx(tuple(weight * y.mean() + (1 - weight) * y), rel=1e-6)


def test_spread_is_zero_when_the_estimates_vary_less_than_their_noise() -> None:
    # Closed form as above: S / (k - 1) < s^2 makes the maximum sit on the boundary tau = 0,
    # where every estimate becomes the precision-weighted mean.
    y = np.array([-2.0, -2.1, -1.9, -2.05])
    result = normal_means(y, [1.0, 1.0, 2.0, 2.0])
    assert result.spread == 0.0
    expected = np.sum(y / np.array([1.0, 1.0, 4.0, 4.0])) / 2.5
    assert result.shrunk == pytest.approx((expected,) * 4, rel=1e-12)
    assert result.shrunk_std_error == pytest.approx((np.sqrt(1 / 2.5),) * 4, rel=1e-12)


def test_two_levels_agree_with_dense_algebra() -> None:
    # Check by independent computation: the same restricted likelihood and posterior from
    # explicit covariance matrices (standard conditional-normal algebra).
    rng = np.random.default_rng(11)
    families = np.repeat(["a", "b", "c", "d", "e", "f"], 6)
    centre = dict(zip("abcdef", rng.normal(-2.0, 0.6, 6), strict=True))
    truth = np.array([centre[f] for f in families]) + rng.normal(0, 0.3, families.size)
    s = rng.uniform(0.1, 0.6, families.size)
    y = truth + s * rng.normal(size=families.size)
    result = normal_means(y, s, list(families))
    codes = np.unique(families, return_inverse=True)[1].astype(float)
    tau2, omega2 = result.spread**2, result.family_spread**2
    assert omega2 > 0.0 and tau2 > 0.0
    best = _dense_restricted(y, s, codes, tau2, omega2)
    assert result.restricted_log_likelihood == pytest.approx(best, abs=1e-9)
    for step in ((1.1, 1.0), (0.9, 1.0), (1.0, 1.1), (1.0, 0.9)):
        assert _dense_restricted(y, s, codes, tau2 * step[0], omega2 * step[1]) < best + 1e-12
    mean, sd = _dense_posterior(y, s, codes, tau2, omega2)
    assert result.shrunk == pytest.approx(tuple(mean), abs=1e-6)
    assert result.shrunk_std_error == pytest.approx(tuple(sd), abs=1e-6)


def test_bad_input_is_refused() -> None:
    with pytest.raises(ValueError, match="at least 3"):
        normal_means([1.0, 2.0], [1.0, 1.0])
    with pytest.raises(ValueError, match="positive"):
        normal_means([1.0, 2.0, 3.0], [1.0, 0.0, 1.0])
    with pytest.raises(ValueError, match="same length"):
        normal_means([1.0, 2.0, 3.0], [1.0, 1.0])


@pytest.fixture(scope="module")
def catalogue_fits() -> tuple[list[models.DemandFit], dict[str, str]]:
    cat = generate_catalogue(7)
    spec = ModelSpec(form="auto", covariates=COVARIATES, log_covariates=LOG_COVARIATES)
    products = [p for p in cat.products if p.truth.trap is None]
    fits = [
        f for f in fit_many([p.history for p in products], spec) if isinstance(f, models.DemandFit)
    ]
    return fits, {p.sku: p.family for p in products}


def test_shrunk_fits_carry_the_shrunk_elasticity_in_every_form(
    catalogue_fits: tuple[list[models.DemandFit], dict[str, str]],
) -> None:
    fits, families = catalogue_fits
    assert {f.form for f in fits} >= {"log-log", "linear", "semi-log"}
    result = shrink_own_price(fits, families=families)
    for fit, copy in zip(fits, result.fits, strict=True):
        row = result.product(fit.sku)
        own = elasticities(copy, at="mean").own
        # Our construction: the copy's elasticity at the means is the shrunk value (iterated
        # for the linear form) and its delta-method error the shrunk error.
        assert own.value == pytest.approx(row.shrunk, abs=1e-8), fit.form
        assert own.std_error == pytest.approx(row.shrunk_std_error, rel=1e-3), fit.form
        assert row.shrunk_std_error <= row.std_error
        eigen = np.linalg.eigvalsh(copy.cov)
        assert eigen.min() > -1e-12 * eigen.max()
        assert copy.quality == fit.quality and copy.terms == fit.terms


def test_a_product_whose_estimate_is_noisy_moves_most(
    catalogue_fits: tuple[list[models.DemandFit], dict[str, str]],
) -> None:
    fits, families = catalogue_fits
    result = shrink_own_price(fits, families=families)
    rows = sorted(result.products, key=lambda r: r.std_error)
    assert rows[0].weight_on_family < rows[-1].weight_on_family
    for r in rows:  # the normal posterior mean: a weighted average of estimate and family mean
        expected = r.weight_on_family * r.family_mean + (1 - r.weight_on_family) * r.estimate
        assert r.shrunk == pytest.approx(expected, abs=1e-9)


def test_too_few_products_are_refused(
    catalogue_fits: tuple[list[models.DemandFit], dict[str, str]],
) -> None:
    fits, _ = catalogue_fits
    with pytest.raises(ValueError, match="at least 3"):
        shrink_own_price(fits[:2])
    with pytest.raises(ValueError, match="once"):
        shrink_own_price([fits[0], fits[0], fits[1]])


def test_on_the_shop_shrinkage_recovers_the_truth_better_on_average() -> None:
    # Recover-the-truth on our invented shop (seeds 1-3, every product without a trap, the
    # default log-log spec): the shrunk elasticities at the means lie closer to the true ones
    # than the products' own estimates, their 95% intervals still cover the truth in most
    # products, and predictions of the last 13 periods from fits without them are no worse.
    # Over 20 seeds the figures are in docs/estimation.md.
    spec = ModelSpec(covariates=COVARIATES, log_covariates=LOG_COVARIATES)
    own_err, shrunk_err, covered = [], [], []
    wape = {"own": [0.0, 0.0], "shrunk": [0.0, 0.0]}
    for seed in (1, 2, 3):
        products = [p for p in generate_catalogue(seed).products if p.truth.trap is None]
        families = {p.sku: p.family for p in products}
        fits = fit_many([p.history for p in products], spec)
        short = fit_many([_before_last(p.history, 13) for p in products], spec)
        assert all(isinstance(f, models.DemandFit) for f in [*fits, *short])
        whole = shrink_own_price(fits, families=families)  # type: ignore[arg-type]
        early = shrink_own_price(short, families=families)  # type: ignore[arg-type]
        for product, fit, shrunk_fit in zip(products, fits, whole.fits, strict=True):
            assert isinstance(fit, models.DemandFit)
            means = fit.variable_means  # the truth at the point the estimates describe
            truth = float(
                product.truth.own_price_elasticity(
                    means["price"],
                    covariates={k: v for k, v in means.items() if k in COVARIATES},
                    cross_prices={
                        k: v for k, v in means.items() if k not in (*COVARIATES, "price")
                    },
                )
            )
            row = whole.product(product.sku)
            own_err.append(row.estimate - truth)
            shrunk_err.append(row.shrunk - truth)
            covered.append(row.ci_low <= truth <= row.ci_high)
            assert elasticities(shrunk_fit).own.value == pytest.approx(row.shrunk, abs=1e-8)
        for name, fitted in (("own", short), ("shrunk", early.fits)):
            for product, fit in zip(products, fitted, strict=True):
                assert isinstance(fit, models.DemandFit)
                expected = models.fitted_units(fit, product.history)[-13:]
                ok = product.history.in_stock[-13:]
                units = product.history.units[-13:]
                wape[name][0] += float(np.sum(np.abs(units[ok] - expected[ok])))
                wape[name][1] += float(np.sum(units[ok]))
    own_rmse = float(np.sqrt(np.mean(np.square(own_err))))
    shrunk_rmse = float(np.sqrt(np.mean(np.square(shrunk_err))))
    assert shrunk_rmse < 0.8 * own_rmse, (own_rmse, shrunk_rmse)
    # 95% intervals over ~110 products: a binomial sd of about 2 points; 0.88 is 3.5 sd below.
    assert np.mean(covered) >= 0.88
    assert wape["shrunk"][0] / wape["shrunk"][1] <= wape["own"][0] / wape["own"][1]


def _before_last(history: models.History, periods: int) -> models.History:
    """The history without its last ``periods`` periods."""

    return history.head(-periods)


def test_an_unreadable_fit_is_left_out_alone(
    catalogue_fits: tuple[list[models.DemandFit], dict[str, str]],
) -> None:
    fits, families = catalogue_fits
    nan_row = tuple(float("nan") for _ in fits[0].covariance[0])
    broken = replace(fits[0], covariance=tuple(nan_row for _ in fits[0].covariance))
    result = shrink_own_price([broken, *fits[1:]], families=families)
    assert result.left_out == (broken.sku,)
    assert result.fits[0] is broken
    assert len(result.products) == len(fits) - 1
    # A product without a family is still shrunk, and says it has none.
    lone = dict(families)
    del lone[fits[1].sku]
    row = shrink_own_price(fits, families=lone).product(fits[1].sku)
    assert row.family is None and row.shrunk_std_error < row.std_error


def test_a_copy_with_the_same_numbers_reproduces_the_coefficient_table(
    catalogue_fits: tuple[list[models.DemandFit], dict[str, str]],
) -> None:
    from models.shrinkage import _with_coefficients

    # The shrunk copy's t statistics, p-values and intervals are recomputed by the same
    # rules the fit used (Student's t with its residual degrees of freedom, or the normal):
    # given the fit's own numbers they give back its own table.
    fits, _ = catalogue_fits
    for fit in fits:
        same = _with_coefficients(fit, fit.params, fit.cov)
        for ours, theirs in zip(same.coefficients, fit.coefficients, strict=True):
            assert ours.estimate == theirs.estimate
            assert ours.std_error == pytest.approx(theirs.std_error, rel=1e-12)
            assert ours.p_value == pytest.approx(theirs.p_value, rel=1e-6, abs=1e-300)
            assert ours.ci_low == pytest.approx(theirs.ci_low, rel=1e-9)
            assert ours.ci_high == pytest.approx(theirs.ci_high, rel=1e-9)


def test_numbers_beyond_any_elasticity_are_left_out(
    catalogue_fits: tuple[list[models.DemandFit], dict[str, str]],
) -> None:
    fits, families = catalogue_fits
    log_log = next(f for f in fits if f.form == "log-log")
    j = log_log.term_names.index("ln(price)")
    rows = list(log_log.coefficients)
    rows[j] = replace(rows[j], estimate=-1e200)
    hostile = replace(log_log, coefficients=tuple(rows))
    others = [f for f in fits if f.sku != log_log.sku]
    result = shrink_own_price([hostile, *others], families=families)
    assert result.left_out == (hostile.sku,)
    assert np.isfinite(result.spread_within_family) and np.isfinite(result.catalogue_mean)
    with pytest.raises(ValueError, match="square"):
        normal_means([1e200, 0.0, 1.0], [1.0, 1.0, 1.0])
    with pytest.raises(ValueError, match="square"):
        normal_means([1.0, 0.0, 1.0], [1e-200, 1.0, 1.0])
