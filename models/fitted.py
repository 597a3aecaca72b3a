"""A fit read back over the history it came from: expected units and the periods it used.

Charts of a fit over time need these: the model's expected units in every period next to
the units sold, which periods entered the estimation (and where its hold-out starts), and
what the fit made without the hold-out expected there.
"""

from __future__ import annotations

import dataclasses

import numpy as np

from models._typing import BoolArray, FloatArray
from models.design import build_design
from models.forecast import expected_units
from models.history import History
from models.holdout import holdout_predictions
from models.result import DemandFit


def fitted_units(fit: DemandFit, history: History) -> FloatArray:
    """Expected units of every period of ``history`` from the fit's coefficients.

    Every period counts, not only the fitted window: stockout periods are included (there
    the model says what demand would have been) and so are periods before the window.
    Log forms are retransformed with the fit's smearing factor, as in :func:`predict`.

    Parameters
    ----------
    fit : DemandFit
        A fit of this product (``history`` may run longer than the fitted window).
    history : History
        The product's history, with every variable the fit's terms need.

    Returns
    -------
    FloatArray
        One value per period of ``history``; ``nan`` where a value the model needs is
        missing.

    Raises
    ------
    UnusableDataError
        A variable is missing from the history, or a log term meets a non-positive value.

    Examples
    --------
    >>> import numpy as np
    >>> from models import ModelSpec, fit_demand, simulate_product
    >>> product = simulate_product(3, form="linear", n_periods=52)
    >>> fit = fit_demand(product.history, ModelSpec(form="linear"))
    >>> units = fitted_units(fit, product.history)
    >>> units.shape, bool(np.isfinite(units).all())
    ((52,), True)
    """
    spec = dataclasses.replace(
        fit.spec,
        window_periods=max(history.n_periods, 4),
        exclude_stockouts=False,
        instruments=(),
    )
    design = build_design(history, spec, fit.form)
    names = [t.name for t in design.terms]
    columns = [names.index(t.name) for t in fit.terms]  # the fit may have dropped terms
    values = expected_units(fit.form, design.regressors[:, columns], fit.params, fit.smearing)
    out = np.full(history.n_periods, np.nan)
    out[np.searchsorted(history.periods, design.periods)] = values
    return out


def fitted_periods(fit: DemandFit, history: History) -> tuple[BoolArray, np.datetime64 | None]:
    """Which periods of ``history`` entered the estimation, and where the hold-out starts.

    The fit's own window, exclusions (stockouts, missing values, zero units under a log)
    and hold-out are rebuilt from its spec on the history up to its last fitted period.

    Parameters
    ----------
    fit : DemandFit
        A fit of this product.
    history : History
        The product's history; periods after the fit's last period are never marked.

    Returns
    -------
    mask : BoolArray
        True for each period of ``history`` among the fit's estimation rows; as many as
        ``fit.quality.n_obs``.
    holdout_start : numpy.datetime64 or None
        First period of the hold-out used to score the fit (None without a hold-out).

    Raises
    ------
    UnusableDataError
        A variable is missing from the history, or a log term meets a non-positive value.

    Examples
    --------
    >>> from models import ModelSpec, fit_demand, simulate_product
    >>> product = simulate_product(3, form="linear", n_periods=52, stockout_rate=0.1)
    >>> fit = fit_demand(product.history, ModelSpec(form="linear"))
    >>> mask, holdout_start = fitted_periods(fit, product.history)
    >>> int(mask.sum()) == fit.quality.n_obs, bool(mask[~product.history.in_stock].any())
    (True, False)
    >>> holdout_start, fit.window.holdout_periods
    (np.datetime64('2024-10-07'), 11)
    """
    last = np.datetime64(fit.window.last_period, "D")
    design = build_design(_until(history, last), fit.spec, fit.form)
    used = design.periods[design.usable]
    mask = np.isin(history.periods, used)
    holdout = fit.window.holdout_periods
    start = design.periods[-holdout] if 0 < holdout <= design.periods.size else None
    return mask, start


def holdout_units(fit: DemandFit, history: History) -> FloatArray:
    """Expected units of the hold-out periods from the fit made without them.

    That fit (the same spec and form on the periods before the hold-out) is the one whose
    forecasts scored ``fit.quality.holdout_wape``; its expected units here are the ones
    that score measured. Drift shows as a gap between them and the units sold.

    Parameters
    ----------
    fit : DemandFit
        A fit of this product.
    history : History
        The product's history (it may run past the fit's last period).

    Returns
    -------
    FloatArray
        One value per period of ``history``: the expected units in the hold-out periods,
        ``nan`` elsewhere, and everywhere when the fit has no hold-out or the fit without
        it cannot be made.

    Raises
    ------
    UnusableDataError
        A variable is missing from the history, or a log term meets a non-positive value.

    Examples
    --------
    >>> import numpy as np
    >>> from models import ModelSpec, fit_demand, simulate_product
    >>> from models.forecast import wape
    >>> product = simulate_product(3, form="linear", n_periods=52)
    >>> fit = fit_demand(product.history, ModelSpec(form="linear"))
    >>> held = holdout_units(fit, product.history)
    >>> int(np.isfinite(held).sum()) == fit.window.holdout_periods
    True
    >>> shown = np.isfinite(held)
    >>> bool(np.isclose(wape(product.history.units[shown], held[shown]), fit.quality.holdout_wape))
    True
    """
    out = np.full(history.n_periods, np.nan)
    size = fit.window.holdout_periods
    last = np.datetime64(fit.window.last_period, "D")
    design = build_design(_until(history, last), fit.spec, fit.form)
    rows = design.regressors.shape[0]
    if not 0 < size < rows:
        return out
    [predicted] = holdout_predictions([design], [size], fit.spec)
    if predicted is not None:
        out[np.searchsorted(history.periods, design.periods[rows - size :])] = predicted
    return out


def _until(history: History, last: np.datetime64) -> History:
    """The history up to and including the period ``last``."""
    n = int(np.searchsorted(history.periods, last, side="right"))
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
