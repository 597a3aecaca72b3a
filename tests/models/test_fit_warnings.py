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


def _near_collinear() -> tuple[History, ModelSpec]:
    # A covariate equal to the price up to one part in 10^8: full rank, badly conditioned.
    h = clean_history(11)
    rng = np.random.default_rng(11)
    twin = h.price * (1.0 + 1e-8 * rng.normal(size=N))
    spec = replace(SPEC, covariates=("rival", "promo", "twin"), log_covariates=("rival", "twin"))
    return replace(h, covariates={**h.covariates, "twin": twin}), spec


def _long_history() -> tuple[History, ModelSpec]:
    return clean_history(12, n=N + 26), SPEC  # 26 periods older than the window


TRIGGERS: dict[str, Callable[[], tuple[History, ModelSpec]]] = {
    "wrong_sign": _positive_price,
    "own_price_not_significant": _no_price_effect,
    "few_observations_per_term": _few_obs,
    "low_price_variation": _flat_price,
    "high_vif": _collinear,
    "stockouts_excluded": _stockouts,
    "zero_units_dropped": _zero_units,
    "missing_values_dropped": _missing,
    "terms_dropped": _constant_term,
    "weak_instrument": _weak_instrument,
    "near_collinear": _near_collinear,
    "window_excluded": _long_history,
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


def test_duplicated_column_is_dropped_with_a_message_naming_it() -> None:
    # An exact copy of a covariate is a linear combination of it: the pivoted QR drops the
    # copy (the later column) and the message names both.
    h = clean_history(13)
    spec = replace(SPEC, covariates=("rival", "promo", "promo_copy"))
    history = replace(h, covariates={**h.covariates, "promo_copy": h.covariates["promo"].copy()})
    for fit in (fit_demand(history, spec), fit_many([history, clean_history(98)], spec)[0]):
        assert isinstance(fit, DemandFit)
        assert fit.term_names == ("intercept", "ln(price)", "ln(rival)", "promo")
        message = next(w.message for w in fit.warnings if w.code == "terms_dropped")
        assert "promo_copy is a linear combination of promo" in message
        assert "near_collinear" not in _codes(fit)


def test_constant_term_is_called_constant() -> None:
    fit = fit_demand(*_constant_term())
    message = next(w.message for w in fit.warnings if w.code == "terms_dropped")
    assert "flat never varies" in message


def test_near_collinear_design_keeps_every_term_and_states_the_condition_number() -> None:
    fit = fit_demand(*_near_collinear())
    assert "ln(twin)" in fit.term_names and "terms_dropped" not in _codes(fit)
    message = next(w.message for w in fit.warnings if w.code == "near_collinear")
    assert f"{fit.diagnostics.condition_number:.3g}" in message


def test_window_note_appears_only_when_older_periods_were_left_out() -> None:
    history, spec = _long_history()
    for fit in (fit_demand(history, spec), fit_many([history, clean_history(97)], spec)[0]):
        assert isinstance(fit, DemandFit)
        assert fit.window.n_window_excluded == 26
        assert fit.window.window_excluded_from == str(history.periods[0])
        message = next(w.message for w in fit.warnings if w.code == "window_excluded")
        assert message.startswith(f"26 older periods (from {history.periods[0]})")
    # A history exactly as long as the window, or shorter, gets no note.
    for n in (N, N - 10):
        fit = fit_demand(clean_history(12, n=n), spec)
        assert fit.window.n_window_excluded == 0 and fit.window.window_excluded_from is None
        assert "window_excluded" not in _codes(fit)
    # A wider window takes the whole history and the note goes away.
    wide = fit_demand(history, replace(spec, window_periods=N + 26))
    assert wide.window.n_window_excluded == 0 and "window_excluded" not in _codes(wide)


def test_own_price_vif_and_sign_messages_quote_figures() -> None:
    fit = fit_demand(*_collinear())
    message = next(w.message for w in fit.warnings if w.code == "high_vif")
    assert "ln(price)" in message and "shadow" in message
