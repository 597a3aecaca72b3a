"""Recover the truth: fits on the seeded tea-shop generator against its known parameters.

Run ``python -m tests.models.test_estimation_truth`` to print the figures (coverage per
form, auto pick rates) for reports.
"""

from __future__ import annotations

from collections import Counter
from typing import Any

import numpy as np
import pytest

from models import DemandFit, ModelSpec, elasticities, fit_many, simulate_product
from models.scenario import COVARIATES, LOG_COVARIATES

N_SEEDS = 200
SPEC = ModelSpec(covariates=COVARIATES, log_covariates=LOG_COVARIATES)
# Distinguishing the forms needs price variation beyond the default 3% voucher noise;
# these settings (documented in the report) give it.
AUTO_SETTINGS: dict[str, dict[str, Any]] = {
    "log-log": {"price_noise": 0.15, "noise_sd": 0.1},
    "semi-log": {"price_noise": 0.15, "noise_sd": 0.1},
    "linear": {"price_noise": 0.15},
}


def coverage(form: str, n_seeds: int = N_SEEDS) -> float:
    """Share of seeds whose 95% own-price elasticity interval covers the true elasticity.

    The elasticity is evaluated at the generator's base point, where the truth is stated,
    so the semi-log and linear forms exercise the delta method too.
    """
    products = [simulate_product(seed, form=form, sku=f"SIM-{seed}") for seed in range(n_seeds)]
    fits = fit_many([p.history for p in products], ModelSpec(**{**_spec_kwargs(), "form": form}))
    covered = 0
    for product, fit in zip(products, fits, strict=True):
        assert isinstance(fit, DemandFit)
        truth = product.truth
        point = {"price": truth.base_price, **truth.covariate_reference}
        own = elasticities(fit, at=point).own
        covered += own.ci_low <= truth.elasticity_at_base <= own.ci_high
    return covered / n_seeds


def _spec_kwargs() -> dict[str, Any]:
    return {"covariates": SPEC.covariates, "log_covariates": SPEC.log_covariates}


def auto_picks(form: str, n_seeds: int = N_SEEDS, **settings: Any) -> Counter[str]:
    """How often ``auto`` chose each form on data generated from ``form``."""
    products = [
        simulate_product(seed, form=form, sku=f"SIM-{seed}", **settings) for seed in range(n_seeds)
    ]
    fits = fit_many([p.history for p in products], ModelSpec(**{**_spec_kwargs(), "form": "auto"}))
    return Counter(f.form for f in fits if isinstance(f, DemandFit))


@pytest.mark.parametrize("form", ["log-log", "semi-log", "linear", "poisson"])
def test_own_price_interval_covers_the_truth(form: str) -> None:
    # 200 seeds: a 95% interval should cover in 92-98% of runs (binomial sd ~1.5 points).
    share = coverage(form)
    assert 0.92 <= share <= 0.98, share


@pytest.mark.parametrize("form", ["log-log", "semi-log", "linear"])
def test_auto_picks_the_true_form_in_most_runs(form: str) -> None:
    picks = auto_picks(form, **AUTO_SETTINGS[form])
    assert picks[form] / N_SEEDS > 0.5, picks


def test_point_estimates_are_centred_on_the_truth() -> None:
    products = [simulate_product(seed, form="log-log") for seed in range(100)]
    fits = fit_many([p.history for p in products], SPEC)
    estimates = np.array([f.own_price.estimate for f in fits if isinstance(f, DemandFit)])
    truth = products[0].truth.price_coef
    assert abs(estimates.mean() - truth) < 3 * estimates.std() / np.sqrt(len(estimates))


def test_instrument_corrects_an_endogenous_price() -> None:
    # Price raised in hot-demand weeks: OLS is biased upward; unit cost is a valid instrument.
    products = [simulate_product(seed, endogeneity=0.1, pass_through=0.9) for seed in range(40)]
    ols = fit_many([p.history for p in products], SPEC)
    iv = fit_many(
        [p.history for p in products],
        ModelSpec(**{**_spec_kwargs(), "instruments": ("unit_cost",)}),
    )
    truth = products[0].truth.price_coef
    # Medians: a just-identified IV estimator has no finite mean.
    ols_bias = np.median([f.own_price.estimate for f in ols if isinstance(f, DemandFit)]) - truth
    iv_bias = np.median([f.own_price.estimate for f in iv if isinstance(f, DemandFit)]) - truth
    assert ols_bias > 1.0
    assert abs(iv_bias) < 0.3
    rejected = np.mean([f.diagnostics.endogeneity_p < 0.05 for f in iv if isinstance(f, DemandFit)])
    assert rejected > 0.5  # the endogeneity test notices in most runs


def figures() -> dict[str, Any]:
    """All recover-the-truth figures, for reports."""
    return {
        "coverage": {form: coverage(form) for form in ("log-log", "semi-log", "linear", "poisson")},
        "auto_picks": {
            form: dict(auto_picks(form, **AUTO_SETTINGS[form])) for form in AUTO_SETTINGS
        },
        "auto_picks_default_prices": {form: dict(auto_picks(form)) for form in AUTO_SETTINGS},
    }


if __name__ == "__main__":
    for key, value in figures().items():
        print(key, value)
