"""The numbers of the fit-over-time chart: actual and fitted units period by period."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from models import UnusableDataError, fitted_periods, fitted_units, holdout_units
from service.ui.chartdata import PROMO_COVARIATE, Subject, fit_label, period_of
from service.ui.records import ProductInfo


@dataclass(frozen=True)
class FitTimeInputs:
    product: ProductInfo
    fit_label: str | None
    periods: np.ndarray  # datetime64[D]
    actual: np.ndarray
    stockout: np.ndarray  # bool
    promotion: np.ndarray  # bool
    fitted: np.ndarray | None  # nan where the model cannot be evaluated
    # The hold-out's expected units from the fit made without them (nan elsewhere): the
    # forecasts the hold-out WAPE scored.
    holdout_fitted: np.ndarray | None
    in_fit: np.ndarray  # bool: the period entered the estimation
    holdout_start: np.datetime64 | None
    holdout_periods: int
    r_squared: float | None
    holdout_wape: float | None
    note: str | None
    period: str  # the word for one period of the history: day, week, month...


def fit_time_inputs(subject: Subject) -> FitTimeInputs:
    product, shown, history = subject.product, subject.fit, subject.history
    unfitted: dict[str, Any] = {
        "fit_label": None,
        "fitted": None,
        "holdout_fitted": None,
        "holdout_start": None,
        "holdout_periods": 0,
        "r_squared": None,
        "holdout_wape": None,
    }
    if history is None:
        none = np.array([], dtype=bool)
        return FitTimeInputs(
            product=product,
            periods=np.array([], dtype="datetime64[D]"),
            actual=np.array([]),
            stockout=none,
            promotion=none,
            in_fit=none,
            note="This product has no sales history yet.",
            period="period",
            **unfitted,
        )
    promo = history.covariates.get(PROMO_COVARIATE)
    promotion = np.nan_to_num(promo) > 0 if promo is not None else np.zeros(history.n_periods, bool)
    base: dict[str, Any] = {
        "product": product,
        "periods": history.periods,
        "actual": history.units,
        "stockout": ~history.in_stock,
        "promotion": promotion,
        "period": period_of(history),
    }
    none_in_fit = np.zeros(history.n_periods, dtype=bool)
    if shown is None:
        return FitTimeInputs(
            **base,
            in_fit=none_in_fit,
            note="No demand model has been fitted for this product yet.",
            **unfitted,
        )
    fit = shown.fit
    note = None if shown.active else "Rejected fit, shown for diagnosis only."
    try:
        # Periods whose fitted units pass the largest double are left out of the line
        # (the chart draws finite values only), not errors.
        with np.errstate(over="ignore", under="ignore", invalid="ignore", divide="ignore"):
            fitted = fitted_units(fit, history)
            held = holdout_units(fit, history)
        in_fit, start = fitted_periods(fit, history)
    except (UnusableDataError, ValueError, ArithmeticError):
        fitted, held, in_fit, start = None, None, none_in_fit, None
        note = (note + " " if note else "") + "The fit cannot be evaluated on the stored history."
    return FitTimeInputs(
        **base,
        fit_label=fit_label(shown),
        fitted=fitted,
        holdout_fitted=held if held is not None and np.isfinite(held).any() else None,
        in_fit=in_fit,
        holdout_start=start,
        holdout_periods=fit.window.holdout_periods if start is not None else 0,
        r_squared=fit.quality.r_squared,
        holdout_wape=fit.quality.holdout_wape,
        note=note,
    )
