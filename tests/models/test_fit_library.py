"""Public surface of the fitting library: spec, fit record, errors, elasticities, prediction."""

from __future__ import annotations

import json
from dataclasses import replace

import numpy as np
import pytest
import statsmodels.api as sm

import models
from models import (
    DemandFit,
    FitFailure,
    History,
    InsufficientDataError,
    ModelSpec,
    SpecError,
    UnusableDataError,
    elasticities,
    fit_demand,
    fit_many,
    pool_family,
    predict,
)
from tests.plugins.fit_cases import SPEC, clean_history


def test_all_is_sorted_and_complete() -> None:
    assert models.__all__ == sorted(models.__all__)
    public = {
        name
        for name, value in vars(models).items()
        if not name.startswith("_") and not isinstance(value, type(models))
    }
    assert public == set(models.__all__)
    for name in models.__all__:
        assert getattr(models, name) is not None


def test_spec_defaults_and_round_trip() -> None:
    spec = ModelSpec()
    assert (spec.form, spec.seasonality, spec.standard_errors) == ("log-log", "none", "hc3")
    assert (spec.window_periods, spec.exclude_stockouts, spec.pooling) == (104, True, "none")
    full = ModelSpec.from_dict(
        {
            "form": "semi-log",
            "covariates": ["promo", "rival"],
            "log_covariates": ["rival"],
            "cross_prices": ["TEA-017"],
            "seasonality": "fourier",
            "trend": True,
            "standard_errors": "hac",
            "instruments": ["unit_cost"],
            "window_periods": 52,
            "exclude_stockouts": False,
            "pooling": "family",
        }
    )
    assert ModelSpec.from_dict(json.loads(json.dumps(full.to_dict()))) == full


def test_spec_errors_list_every_problem() -> None:
    with pytest.raises(SpecError) as info:
        ModelSpec.from_dict(
            {
                "form": "cubic",
                "covariates": ["a"],
                "log_covariates": ["b"],
                "trend": "yes",
                "colour": 1,
                "window_periods": 2,
            }
        )
    fields = {f for f, _ in info.value.problems}
    assert {"colour", "trend"} <= fields
    with pytest.raises(SpecError) as info:
        ModelSpec.from_dict({"form": "cubic", "log_covariates": ["b"], "window_periods": 2})
    fields = {f for f, _ in info.value.problems}
    assert fields == {"form", "log_covariates", "window_periods"}
    assert isinstance(info.value, ValueError)
    with pytest.raises(SpecError, match="instruments"):
        ModelSpec(covariates=("unit_cost",), instruments=("unit_cost",))


def test_insufficient_data_says_how_many_more() -> None:
    h = clean_history(0, n=6)
    with pytest.raises(InsufficientDataError) as info:
        fit_demand(h, SPEC)
    error = info.value
    assert isinstance(error, ValueError)
    assert (error.n_obs, error.n_required, error.n_missing) == (6, 7, 1)
    assert "6 usable observations" in str(error) and "1 more" in str(error)


def test_batch_reports_failures_and_keeps_going() -> None:
    short = clean_history(1, n=5)
    flat = replace(clean_history(2), price=np.full(104, 4.0))
    fits = fit_many([clean_history(0), short, flat, clean_history(3, n=80)], SPEC)
    assert isinstance(fits[0], DemandFit) and isinstance(fits[3], DemandFit)
    assert isinstance(fits[1], FitFailure) and fits[1].error == "InsufficientDataError"
    assert (fits[1].n_obs, fits[1].n_required) == (5, 7)
    assert isinstance(fits[2], FitFailure) and fits[2].error == "UnusableDataError"
    assert json.dumps(fits[1].to_dict())
    with pytest.raises(UnusableDataError):
        fit_demand(flat, SPEC)


def test_rank_deficient_product_in_a_batch_is_refitted_without_the_term() -> None:
    spec = replace(SPEC, covariates=("rival", "promo", "flat"))
    good = clean_history(0)
    good = replace(good, covariates={**good.covariates, "flat": np.linspace(1, 2, 104)})
    bad = clean_history(1)
    bad = replace(bad, covariates={**bad.covariates, "flat": np.full(104, 2.0)})
    twin = clean_history(2)
    twin = replace(twin, covariates={**twin.covariates, "flat": twin.covariates["promo"] * 2 + 1})
    fits = fit_many([good, bad, twin], spec)
    assert all(isinstance(f, DemandFit) for f in fits)
    assert "flat" in fits[0].term_names  # type: ignore[union-attr]
    for fit in fits[1:]:
        assert isinstance(fit, DemandFit)
        assert "flat" not in fit.term_names
        assert "terms_dropped" in {w.code for w in fit.warnings}
    # Same answer as a regression without the term.
    plain = fit_demand(bad, SPEC)
    assert np.allclose(fits[1].params, plain.params, rtol=1e-10)  # type: ignore[union-attr]


def _strict_json(fit: DemandFit) -> str:
    return json.dumps(fit.to_dict(), allow_nan=False)


def test_to_dict_is_json_safe_and_from_dict_restores_everything() -> None:
    spec = replace(SPEC, seasonality="month", trend=True, cross_prices=())
    h = clean_history(0)
    fit = fit_demand(h, spec)
    restored = DemandFit.from_dict(json.loads(_strict_json(fit)))
    assert restored == fit
    assert elasticities(restored) == elasticities(fit)
    assert predict(restored, price=4.0, unit_cost=2.0) == predict(fit, price=4.0, unit_cost=2.0)


def test_to_dict_turns_nan_into_none() -> None:
    h = clean_history(0)
    fit = fit_demand(h, replace(SPEC, form="poisson"))
    data = json.loads(_strict_json(fit))
    assert data["quality"]["adj_r_squared"] is None
    assert data["diagnostics"]["jarque_bera_p"] is None
    assert DemandFit.from_dict(data) == fit


def test_equation_keeps_signs() -> None:
    fit = fit_demand(clean_history(0), SPEC)
    assert fit.equation.startswith("ln(units) = ")
    slope = fit.own_price.estimate
    assert f" - {abs(slope):.4g} ln(price)" in fit.equation and "+ -" not in fit.equation
    linear = fit_demand(clean_history(0), replace(SPEC, form="linear"))
    assert linear.equation.startswith("units = ") and "+ -" not in linear.equation


def _linear_history(seed: int = 0, n: int = 80) -> History:
    rng = np.random.default_rng(seed)
    price = rng.uniform(3.0, 6.0, n)
    income = rng.uniform(20.0, 40.0, n)
    other = rng.uniform(3.0, 6.0, n)
    units = 300.0 - 30.0 * price + 2.0 * income + 8.0 * other + rng.normal(0, 5.0, n)
    return History(
        "TEA-L",
        np.arange(np.datetime64("2023-01-02"), np.datetime64("2023-01-02") + 7 * n, 7),
        price,
        units,
        np.full(n, np.nan),
        np.ones(n, bool),
        covariates={"income": income},
        cross_prices={"TEA-X": other},
    )


LINEAR_SPEC = ModelSpec(
    form="linear", covariates=("income",), cross_prices=("TEA-X",), standard_errors="classical"
)


def test_linear_elasticity_is_coefficient_times_value_over_predicted_units() -> None:
    h = _linear_history()
    fit = fit_demand(h, LINEAR_SPEC)
    report = elasticities(fit, at="mean", income_like=["income"])
    b = dict(zip(fit.term_names, fit.params, strict=True))
    means = {
        k: float(np.mean(v))
        for k, v in {
            "price": h.price,
            "income": h.covariates["income"],
            "TEA-X": h.cross_prices["TEA-X"],
        }.items()
    }
    units_hat = (
        b["intercept"]
        + b["price"] * means["price"]
        + b["income"] * means["income"]
        + b["price[TEA-X]"] * means["TEA-X"]
    )
    # Closed form: e = b * x / q at the point; with an intercept q at the means is mean(units).
    assert units_hat == pytest.approx(np.mean(h.units), rel=1e-10)
    assert report.own.value == pytest.approx(b["price"] * means["price"] / units_hat, rel=1e-12)
    assert report.row("income").value == pytest.approx(b["income"] * means["income"] / units_hat)
    assert report.row("TEA-X").classification == "substitute"
    assert report.row("income").classification in ("necessity", "luxury")
    assert report.own.kind == "own" and report.row("TEA-X").kind == "cross"


def test_linear_elasticity_standard_error_matches_numerical_delta_method() -> None:
    fit = fit_demand(_linear_history(), LINEAR_SPEC)
    at = {"price": 5.0, "income": 25.0}
    report = elasticities(fit, at=at)
    beta, cov = fit.params, fit.cov
    row = np.array([1.0, 5.0, fit.variable_means["TEA-X"], 25.0])

    def own(b: np.ndarray) -> float:
        return b[1] * 5.0 / float(row @ b)

    step = 1e-6 * np.maximum(np.abs(beta), 1.0)
    grad = np.array(
        [
            (own(beta + e) - own(beta - e)) / (2 * h)
            for e, h in ((np.eye(4)[j] * step[j], step[j]) for j in range(4))
        ]
    )
    assert report.own.value == pytest.approx(own(beta), rel=1e-12)
    assert report.own.std_error == pytest.approx(float(np.sqrt(grad @ cov @ grad)), rel=1e-6)
    assert report.at == "given" and report.point["price"] == 5.0


def test_log_log_elasticities_are_coefficients_and_level_terms_scale() -> None:
    fit = fit_demand(clean_history(0), SPEC)
    report = elasticities(fit, at="latest")
    assert report.own.value == fit.own_price.estimate
    assert report.own.std_error == pytest.approx(fit.own_price.std_error, rel=1e-12)
    assert report.own.classification == "elastic"
    promo = fit.coefficient("promo")
    assert report.row("promo").value == pytest.approx(promo.estimate * fit.variable_latest["promo"])
    assert report.row("rival").value == fit.coefficient("ln(rival)").estimate
    assert json.dumps(report.to_dict(), allow_nan=False)
    assert report.to_dict()["rows"][0]["class"] == "elastic"


def test_own_price_classes() -> None:
    inelastic = fit_demand(clean_history(0, price_coef=-0.4), SPEC)
    assert elasticities(inelastic).own.classification == "inelastic"
    # A true elasticity of -1: two years of weeks leave an interval wider than the unit band
    # around -1, so the class is "unclear"; forty years of weeks pin it inside the band.
    short = elasticities(fit_demand(clean_history(0, price_coef=-1.0), SPEC)).own
    assert short.ci_low < -1.0 < short.ci_high
    assert short.classification == "unclear"
    long_spec = replace(SPEC, window_periods=2080)
    precise = elasticities(fit_demand(clean_history(0, n=2080, price_coef=-1.0), long_spec)).own
    assert precise.ci_low >= -1.1 and precise.ci_high <= -0.9
    assert precise.classification == "unit-elastic"


def test_own_price_class_follows_the_interval_not_only_the_estimate() -> None:
    # Twelve periods with a noisy price effect: the estimate is below -1 but its interval
    # spans -1, so the class says "unclear" instead of "elastic".
    bare = replace(SPEC, covariates=(), log_covariates=())
    noisy = fit_demand(clean_history(3, n=12, price_coef=-1.5), bare)
    own = elasticities(noisy).own
    assert own.ci_low < -1.0 < own.ci_high
    assert own.classification == "unclear"
    rising = elasticities(fit_demand(clean_history(0, price_coef=1.5), SPEC)).own
    assert rising.ci_low > 0.0 and rising.classification == "wrong sign"


def test_prediction_linear_matches_statsmodels_prediction_interval() -> None:
    h = _linear_history()
    fit = fit_demand(h, LINEAR_SPEC)
    pred = predict(
        fit, price=4.5, covariates={"income": 30.0}, cross_prices={"TEA-X": 5.0}, unit_cost=2.0
    )
    design = np.column_stack(
        [np.ones(80), h.price, h.cross_prices["TEA-X"], h.covariates["income"]]
    )
    ref = sm.OLS(h.units, design).fit().get_prediction(np.array([[1.0, 4.5, 5.0, 30.0]]))
    frame = ref.summary_frame(alpha=0.05)
    assert pred.expected_units == pytest.approx(float(frame["mean"].iloc[0]), rel=1e-10)
    assert pred.interval_low == pytest.approx(float(frame["obs_ci_lower"].iloc[0]), rel=1e-9)
    assert pred.interval_high == pytest.approx(float(frame["obs_ci_upper"].iloc[0]), rel=1e-9)
    assert pred.revenue == pytest.approx(4.5 * pred.expected_units)
    assert pred.profit == pytest.approx(2.5 * pred.expected_units)


def test_log_prediction_uses_smearing_for_the_mean_not_the_interval() -> None:
    fit = fit_demand(clean_history(0), replace(SPEC, standard_errors="classical"))
    pred = predict(fit, price=4.0)
    assert fit.smearing is not None and fit.smearing > 1.0
    median = np.sqrt(pred.interval_low * pred.interval_high)  # symmetric on the log scale
    assert pred.expected_units == pytest.approx(median * fit.smearing, rel=1e-10)
    assert pred.interval_low < pred.expected_units < pred.interval_high
    assert pred.profit is None


def test_smearing_recovers_the_mean_on_simulated_lognormal_data() -> None:
    # Duan (1983): mean(exp(resid)) estimates E[exp(u)] = exp(s^2 / 2) for normal errors.
    sigma = 0.5
    rng = np.random.default_rng(3)
    n = 104
    price = rng.uniform(3, 6, n)
    units = np.exp(4.0 - 1.5 * np.log(price) + rng.normal(0, sigma, n))
    h = History(
        "TEA-S", clean_history(0).periods, price, units, np.full(n, np.nan), np.ones(n, bool)
    )
    fit = fit_demand(h, ModelSpec(form="log-log"))
    assert fit.smearing == pytest.approx(np.exp(sigma**2 / 2), rel=0.08)


def test_pooling_shrinks_toward_family_mean() -> None:
    histories = [
        clean_history(s, n=n, price_coef=c)
        for s, n, c in ((0, 104, -1.6), (1, 104, -2.0), (2, 20, -3.5), (3, 104, -1.8))
    ]
    spec = replace(SPEC, pooling="family")
    fits = fit_many(histories, spec, families={h.sku: "green" for h in histories})
    pooled = [f.pooled for f in fits if isinstance(f, DemandFit)]
    assert all(p is not None for p in pooled)
    mean = pooled[0].family_mean  # type: ignore[union-attr]
    for p in pooled:
        assert p is not None and p.family == "green" and p.n_products == 4
        assert abs(p.pooled - mean) <= abs(p.raw - mean) + 1e-12
        assert p.pooled_std_error <= p.raw_std_error + 1e-12
    # The thin product (20 weeks) leans most on the family.
    weights = [p.weight_on_family for p in pooled]  # type: ignore[union-attr]
    assert int(np.argmax(weights)) == 2
    # Precision-weighted mean with the DerSimonian-Laird between-product variance.
    raw = np.array([p.raw for p in pooled])  # type: ignore[union-attr]
    var = np.array([p.raw_std_error for p in pooled]) ** 2  # type: ignore[union-attr]
    tau2 = pooled[0].between_variance  # type: ignore[union-attr]
    assert mean == pytest.approx(np.sum(raw / (var + tau2)) / np.sum(1 / (var + tau2)))
    restored = DemandFit.from_dict(json.loads(json.dumps(fits[0].to_dict())))  # type: ignore[union-attr]
    assert restored.pooled == fits[0].pooled  # type: ignore[union-attr]
    assert elasticities(restored).pooled == restored.pooled
    # Without a family map the batch is one family; alone, nothing is pooled.
    assert pool_family([fits[0]])[0].pooled == fits[0].pooled  # type: ignore[list-item]


def test_auto_reports_every_candidate_and_picks_the_lowest() -> None:
    fit = fit_demand(clean_history(0), replace(SPEC, form="auto"))
    assert set(fit.candidate_scores) == {"linear", "log-log", "semi-log"}
    best = min(fit.candidate_scores, key=lambda k: fit.candidate_scores[k])  # type: ignore[arg-type,return-value]
    assert fit.form == best and fit.spec.form == "auto"
    zeros = clean_history(0)
    units = zeros.units.copy()
    units[[4, 9]] = 0.0
    with_zero = fit_demand(replace(zeros, units=units), replace(SPEC, form="auto"))
    assert "poisson" in with_zero.candidate_scores
    batched = fit_many([clean_history(0)], replace(SPEC, form="auto"))[0]
    assert isinstance(batched, DemandFit)
    assert batched.candidate_scores == pytest.approx(fit.candidate_scores, rel=1e-9)


def test_auto_with_too_little_data_raises() -> None:
    # 4 terms need 7 training rows; the last rolling origin trains on all but one row.
    with pytest.raises(InsufficientDataError) as info:
        fit_demand(clean_history(0, n=7), replace(SPEC, form="auto"))
    assert (info.value.n_obs, info.value.n_required) == (7, 8)
    assert fit_demand(clean_history(0, n=8), replace(SPEC, form="auto")).quality.n_obs == 8


def test_seasonality_and_trend_terms() -> None:
    fit = fit_demand(clean_history(0), replace(SPEC, seasonality="fourier", trend=True))
    assert {"sin_1", "cos_1", "sin_2", "cos_2", "trend"} <= set(fit.term_names)
    month = fit_demand(clean_history(0), replace(SPEC, seasonality="month"))
    assert sum(name.startswith("month_") for name in month.term_names) == 11


def test_holdout_wape_uses_the_last_periods() -> None:
    h = clean_history(0)
    fit = fit_demand(h, SPEC, holdout_periods=20)
    assert fit.window.holdout_periods == 20
    train = replace(
        h,
        periods=h.periods[:84],
        price=h.price[:84],
        units=h.units[:84],
        unit_cost=h.unit_cost[:84],
        in_stock=h.in_stock[:84],
        covariates={k: v[:84] for k, v in h.covariates.items()},
    )
    early = fit_demand(train, SPEC, holdout_periods=0)
    x = np.column_stack(
        [
            np.ones(20),
            np.log(h.price[84:]),
            np.log(h.covariates["rival"][84:]),
            h.covariates["promo"][84:],
        ]
    )
    predicted = np.exp(x @ early.params) * early.smearing
    expected = np.sum(np.abs(h.units[84:] - predicted)) / np.sum(h.units[84:])
    assert fit.quality.holdout_wape == pytest.approx(expected, rel=1e-9)
    assert fit.quality.n_obs == 104
    with pytest.raises(InsufficientDataError):
        fit_demand(h, SPEC, holdout_periods=100)
