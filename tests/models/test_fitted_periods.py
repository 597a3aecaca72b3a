"""A fit read back over its history: fitted_units and fitted_periods.

References: ``models.predict`` at each period's own values (a separate, scalar code
path) and statsmodels OLS fitted values on the same estimation rows, retransformed with
Duan's (1983) smearing factor ``mean(exp(residual))``. The periods a fit used are
checked against the fit's own record (``quality.n_obs``, the window, the hold-out size)
and the stockout flags of the simulated history.
"""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm

from models import (
    DemandFit,
    History,
    ModelSpec,
    fit_demand,
    fitted_periods,
    fitted_units,
    predict,
    simulate_product,
)
from models.scenario import COVARIATES, LOG_COVARIATES

SPEC = ModelSpec(covariates=COVARIATES, log_covariates=LOG_COVARIATES)


def _head(history: History, n: int) -> History:
    return History(
        sku=history.sku,
        periods=history.periods[:n],
        price=history.price[:n],
        units=history.units[:n],
        unit_cost=history.unit_cost[:n],
        in_stock=history.in_stock[:n],
        covariates={k: v[:n] for k, v in history.covariates.items()},
        cross_prices={k: v[:n] for k, v in history.cross_prices.items()},
    )


@pytest.mark.parametrize("form", ["linear", "log-log", "semi-log", "poisson"])
def test_fitted_units_equal_predict_at_every_period(form: str) -> None:
    product = simulate_product(11, form=form, stockout_rate=0.08, sku=f"FIT-{form}")
    history = product.history
    fit = fit_demand(history, ModelSpec(**{**SPEC.to_dict(), "form": form}))
    units = fitted_units(fit, history)
    assert units.shape == (history.n_periods,)
    assert np.isfinite(units).all()
    assert (~history.in_stock).any()  # stockout periods are read back too
    for t in range(history.n_periods):
        values = {name: float(history.covariates[name][t]) for name in COVARIATES}
        expected = predict(fit, price=float(history.price[t]), covariates=values)
        assert units[t] == pytest.approx(expected.expected_units, rel=1e-12)


def test_log_log_fitted_units_equal_statsmodels_with_smearing() -> None:
    product = simulate_product(4, form="log-log", stockout_rate=0.06, sku="FIT-SM")
    history = product.history
    fit = fit_demand(history, SPEC)
    mask, _ = fitted_periods(fit, history)
    cov = history.covariates
    design = np.column_stack(
        [
            np.ones(history.n_periods),
            np.log(history.price),
            np.log(cov["rival_price"]),
            cov["promo"],
            np.log(cov["ad_spend"]),
            cov["holiday"],
        ]
    )
    reference = sm.OLS(np.log(history.units[mask]), design[mask]).fit()
    smearing = float(np.mean(np.exp(reference.resid)))
    expected = np.exp(design @ reference.params) * smearing
    np.testing.assert_allclose(fitted_units(fit, history), expected, rtol=1e-9)


def test_fitted_periods_match_the_fit_record() -> None:
    product = simulate_product(8, form="linear", stockout_rate=0.1, sku="FIT-REC")
    history = product.history
    fit = fit_demand(history, SPEC)
    mask, start = fitted_periods(fit, history)
    assert mask.dtype == np.bool_ and mask.shape == (history.n_periods,)
    assert int(mask.sum()) == fit.quality.n_obs == fit.window.n_obs
    assert fit.window.n_stockouts_excluded == int((~history.in_stock).sum()) > 0
    assert not mask[~history.in_stock].any()
    assert mask[history.in_stock].all()
    # The hold-out is the last `holdout_periods` kept (in-stock) periods.
    holdout = fit.window.holdout_periods
    assert holdout > 0
    assert start == history.periods[history.in_stock][-holdout]


def test_window_and_later_periods_are_not_marked() -> None:
    product = simulate_product(9, form="semi-log", sku="FIT-WIN")
    full = product.history
    spec = ModelSpec(**{**SPEC.to_dict(), "form": "semi-log", "window_periods": 60})
    fit = fit_demand(_head(full, 90), spec)
    mask, start = fitted_periods(fit, full)
    assert int(mask.sum()) == fit.quality.n_obs == 60
    assert np.flatnonzero(mask).tolist() == list(range(30, 90))
    assert str(full.periods[89]) == fit.window.last_period
    assert start == full.periods[90 - fit.window.holdout_periods]
    # Expected units cover every period, the fitted window and beyond.
    units = fitted_units(fit, full)
    assert np.isfinite(units).all()
    t = 100
    values = {name: float(full.covariates[name][t]) for name in COVARIATES}
    later = predict(fit, price=float(full.price[t]), covariates=values)
    assert units[t] == pytest.approx(later.expected_units, rel=1e-12)


def test_no_holdout_gives_no_start() -> None:
    product = simulate_product(2, form="log-log", sku="FIT-NOH")
    fit = fit_demand(product.history, SPEC, holdout_periods=0)
    assert isinstance(fit, DemandFit)
    mask, start = fitted_periods(fit, product.history)
    assert start is None
    assert int(mask.sum()) == fit.quality.n_obs


def test_zero_unit_periods_are_left_out_of_a_log_fit() -> None:
    product = simulate_product(6, form="poisson", base_units=1.5, sku="FIT-ZERO")
    history = product.history
    zeros = history.units == 0.0
    assert zeros.any()
    fit = fit_demand(history, ModelSpec(**{**SPEC.to_dict(), "form": "log-log"}))
    mask, _ = fitted_periods(fit, history)
    assert fit.window.n_zero_units_dropped == int(zeros.sum())
    assert not mask[zeros].any()
    assert int(mask.sum()) == fit.quality.n_obs == history.n_periods - int(zeros.sum())
    # The model still says what demand it expected in those periods.
    assert np.isfinite(fitted_units(fit, history)[zeros]).all()
