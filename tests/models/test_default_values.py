"""Which values the drivers a request does not send take: the latest fitted period's, with
events (covariates only ever 0 or 1 in the fitted periods: a promotion, a holiday) off.

Checked on the invented tea shop (recover-the-truth data, models.generate_catalogue) against
the history itself and against the documented rule, for one fit and the stacked path alike.
"""

from __future__ import annotations

import numpy as np
import pytest

import models

CATALOGUE = models.generate_catalogue(7)
SPEC = models.ModelSpec(covariates=models.COVARIATES, log_covariates=models.LOG_COVARIATES)
SKUS = ("TEA-004", "TEA-010", "TEA-021")


def _binary_covariates(history: models.History) -> set[str]:
    """Independent reading of the rule: the spec's covariates whose values are all 0 or 1."""
    return {
        name
        for name in SPEC.covariates
        if np.all(np.isin(history.covariates[name][np.isfinite(history.covariates[name])], (0, 1)))
    }


@pytest.mark.parametrize("sku", SKUS)
def test_events_are_the_covariates_that_were_only_zero_or_one(sku: str) -> None:
    history = CATALOGUE.product(sku).history
    fit = models.fit_demand(history, SPEC)
    assert set(fit.variable_events) == _binary_covariates(history)
    # The demo's promotion and holiday flags are events; ad spend and rival prices are not.
    assert {"promo", "holiday"} <= set(fit.variable_events)
    assert not {"ad_spend", "rival_price"} & set(fit.variable_events)


def test_default_values_are_the_latest_with_events_off() -> None:
    fit = models.fit_demand(CATALOGUE.product("TEA-004").history, SPEC)
    defaults = fit.default_values
    for name, latest in fit.variable_latest.items():
        assert defaults[name] == (0.0 if name in fit.variable_events else latest)
    # A prediction without covariates is one at those values, with events turned on by name.
    plain = models.predict(fit, price=15.0)
    explicit = models.predict(fit, price=15.0, covariates={"promo": 0.0, "holiday": 0.0})
    assert plain.expected_units == pytest.approx(explicit.expected_units, rel=1e-12)
    promoted = models.predict(fit, price=15.0, covariates={"promo": 1.0})
    assert promoted.expected_units != pytest.approx(plain.expected_units, rel=1e-6)


def test_the_stacked_path_finds_the_same_events() -> None:
    histories = [CATALOGUE.product(sku).history for sku in SKUS]
    stacked = models.fit_many(histories, SPEC)
    for history, fit in zip(histories, stacked, strict=True):
        assert isinstance(fit, models.DemandFit)
        assert fit.variable_events == models.fit_demand(history, SPEC).variable_events


def test_fits_stored_before_events_were_recorded_turn_none_off() -> None:
    fit = models.fit_demand(CATALOGUE.product("TEA-004").history, SPEC)
    data = fit.to_dict()
    assert data["variable_events"] == list(fit.variable_events)
    del data["variable_events"]
    old = models.DemandFit.from_dict(data)
    assert old.variable_events == () and old.default_values == old.variable_latest
    assert models.DemandFit.from_dict(fit.to_dict()) == fit
