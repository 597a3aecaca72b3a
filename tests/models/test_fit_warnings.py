"""Every warning code has a case that triggers it and a clean case that does not."""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import replace

import numpy as np
import pytest

from models import DemandFit, History, ModelSpec, fit_demand, fit_many
from models.checks import WARNING_CODES
from tests.plugins.fit_cases import CLEAN_PERIODS, SPEC, clean_history

N = CLEAN_PERIODS


def _codes(fit: DemandFit) -> set[str]:
    return {w.code for w in fit.warnings}


def _positive_price() -> tuple[History, ModelSpec]:
    return clean_history(1, price_coef=1.5), SPEC


def _no_price_effect() -> tuple[History, ModelSpec]:
    return clean_history(2, price_coef=0.0), SPEC


def _few_obs() -> tuple[History, ModelSpec]:
    return clean_history(3, n=30), SPEC  # 30 observations for 4 terms


def _flat_price() -> tuple[History, ModelSpec]:
    h = clean_history(4)
    rng = np.random.default_rng(4)
    return replace(h, price=5.0 * np.exp(rng.normal(0, 0.005, N))), SPEC


def _collinear() -> tuple[History, ModelSpec]:
    h = clean_history(5)
    rng = np.random.default_rng(5)
    shadow = h.price * (1 + rng.normal(0, 0.01, N))
    spec = replace(SPEC, covariates=("rival", "promo", "shadow"))
    return replace(h, covariates={**h.covariates, "shadow": shadow}), spec


def _stockouts() -> tuple[History, ModelSpec]:
    h = clean_history(6)
    in_stock = np.ones(N, dtype=bool)
    in_stock[[5, 40, 77]] = False
    return replace(h, in_stock=in_stock), SPEC


def _zero_units() -> tuple[History, ModelSpec]:
    h = clean_history(7)
    units = h.units.copy()
    units[[3, 50]] = 0.0
    return replace(h, units=units), SPEC


def _missing() -> tuple[History, ModelSpec]:
    h = clean_history(8)
    rival = h.covariates["rival"].copy()
    rival[10] = np.nan
    return replace(h, covariates={**h.covariates, "rival": rival}), SPEC


def _constant_term() -> tuple[History, ModelSpec]:
    h = clean_history(9)
    spec = replace(SPEC, covariates=("rival", "promo", "flat"))
    return replace(h, covariates={**h.covariates, "flat": np.full(N, 3.0)}), spec


def _weak_instrument() -> tuple[History, ModelSpec]:
    # "noise" is unrelated to price, so the first stage has no power.
    return clean_history(10), replace(SPEC, instruments=("noise",))


TRIGGERS: dict[str, Callable[[], tuple[History, ModelSpec]]] = {
    "own_price_positive": _positive_price,
    "own_price_not_significant": _no_price_effect,
    "few_observations_per_term": _few_obs,
    "low_price_variation": _flat_price,
    "high_vif": _collinear,
    "stockouts_excluded": _stockouts,
    "zero_units_dropped": _zero_units,
    "missing_values_dropped": _missing,
    "terms_dropped": _constant_term,
    "weak_instrument": _weak_instrument,
}


def test_every_code_has_a_trigger() -> None:
    assert set(TRIGGERS) == set(WARNING_CODES)


@pytest.mark.parametrize("code", sorted(TRIGGERS))
def test_warning_is_triggered(code: str) -> None:
    history, spec = TRIGGERS[code]()
    fit = fit_demand(history, spec)
    assert code in _codes(fit)
    message = next(w.message for w in fit.warnings if w.code == code)
    assert message.endswith(".") and len(message) > 20
    # The batched path reports the same warnings.
    batched = fit_many([history, clean_history(99)], spec)[0]
    assert isinstance(batched, DemandFit)
    assert _codes(batched) == _codes(fit)


@pytest.mark.parametrize("code", sorted(TRIGGERS))
def test_warning_is_absent_on_clean_data(code: str) -> None:
    spec = replace(SPEC, instruments=("unit_cost",)) if code == "weak_instrument" else SPEC
    fit = fit_demand(clean_history(0), spec)
    assert code not in _codes(fit)


def test_clean_fit_has_no_warning_at_all() -> None:
    assert fit_demand(clean_history(0), SPEC).warnings == ()


def test_dropped_term_is_named_and_missing_from_the_table() -> None:
    history, spec = _constant_term()
    fit = fit_demand(history, spec)
    assert "flat" not in fit.term_names
    assert "flat" in next(w.message for w in fit.warnings if w.code == "terms_dropped")


def test_own_price_vif_and_sign_messages_quote_figures() -> None:
    fit = fit_demand(*_collinear())
    message = next(w.message for w in fit.warnings if w.code == "high_vif")
    assert "ln(price)" in message and "shadow" in message
