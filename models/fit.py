"""Fit demand models: one product (:func:`fit_demand`) or many sharing a spec (:func:`fit_many`).

Both paths produce the same figures: the batched one fits the least-squares forms of
all products with equal window length as stacks (:mod:`models.batch`) and every other
product as :func:`fit_demand` does. Reported coefficients always use every usable
period; ``holdout_wape`` comes from a separate fit that leaves out the last periods and
predicts them (:mod:`models.holdout`).
"""

from __future__ import annotations

import math
from collections import defaultdict
from collections.abc import Mapping, Sequence

import numpy as np

from models.batch import fit_stacked, stacked_path_applies
from models.checks import equation_text, fit_warnings
from models.design import build_design, event_covariates
from models.engine import FittedDesign, check_size, fit_design
from models.errors import InsufficientDataError
from models.forecast import smearing_factor
from models.history import History
from models.holdout import holdout_size, holdout_wapes
from models.result import (
    Coefficient,
    DataWindow,
    DemandFit,
    Diagnostics,
    FitFailure,
    Quality,
)
from models.select import score_forms_by_fold, steady_form
from models.spec import LOG_RESPONSE_FORMS, ModelSpec


def _assemble(
    fitted: FittedDesign,
    spec: ModelSpec,
    *,
    holdout_periods: int,
    holdout_wape: float | None,
    candidate_scores: dict[str, float | None],
) -> DemandFit:
    design, estimate = fitted.design, fitted.estimate
    usable = design.usable
    crit = estimate.critical_value(0.95)
    params = estimate.params.tolist()
    bse = estimate.bse.tolist()
    pvalues = estimate.pvalues().tolist()
    vifs = estimate.vif.tolist()
    rows = tuple(
        Coefficient(
            term=term.name,
            estimate=b,
            std_error=se,
            t_stat=b / se if se > 0 else float("nan"),
            p_value=p,
            ci_low=b - crit * se,
            ci_high=b + crit * se,
            vif=None if term.kind == "intercept" or not math.isfinite(v) else v,
        )
        for term, b, se, p, v in zip(design.terms, params, bse, pvalues, vifs, strict=True)
    )
    x = design.regressors[usable]
    periods = design.periods[usable]
    names = [t.name for t in design.terms]
    log_form = design.form in LOG_RESPONSE_FORMS
    price = design.variables["price"][usable]
    var_values = {k: v[usable] for k, v in design.variables.items()}
    var_means = {k: float(v.mean()) for k, v in var_values.items()}
    var_latest = {k: float(v[-1]) for k, v in var_values.items()}
    (events,) = event_covariates(spec.covariates, var_values)
    # Summed along contiguous rows, as the batched path does, so both give the same digits.
    col_means = np.ascontiguousarray(x.T).mean(axis=1).tolist()
    col_latest = x[-1].tolist()
    return DemandFit(
        sku=design.sku,
        spec=spec,
        form=design.form,
        terms=design.terms,
        coefficients=rows,
        covariance=tuple(tuple(row) for row in estimate.cov.tolist()),
        quality=Quality(
            n_obs=design.n_usable,
            r_squared=estimate.r_squared,
            adj_r_squared=estimate.adj_r_squared,
            f_stat=estimate.f_stat,
            f_p_value=estimate.f_p_value,
            sigma=estimate.sigma,
            aic=estimate.aic,
            bic=estimate.bic,
            holdout_wape=holdout_wape,
        ),
        diagnostics=Diagnostics(
            condition_number=(
                estimate.condition_number if np.isfinite(estimate.condition_number) else None
            ),
            durbin_watson=estimate.durbin_watson,
            breusch_pagan_p=estimate.breusch_pagan_p,
            jarque_bera_p=estimate.jarque_bera_p,
            first_stage_f=estimate.first_stage_f,
            endogeneity_p=estimate.endogeneity_p,
        ),
        warnings=fit_warnings(design, estimate, fitted.dropped),
        equation=equation_text(design.form, design.terms, params),
        df_resid=estimate.df_resid,
        use_t=estimate.use_t,
        variable_means=var_means,
        variable_latest=var_latest,
        regressor_means={n: col_means[j] for j, n in enumerate(names) if j > 0},
        regressor_latest={n: col_latest[j] for j, n in enumerate(names) if j > 0},
        variable_events=events,
        price_range=(float(price.min()), float(price.max())),
        window=DataWindow(
            first_period=str(periods[0]),
            last_period=str(periods[-1]),
            n_obs=design.n_usable,
            n_window=design.n_window,
            n_stockouts_excluded=design.n_stockouts,
            n_zero_units_dropped=design.n_zero_dropped,
            n_missing_dropped=design.n_missing,
            holdout_periods=holdout_periods,
            n_window_excluded=design.n_window_excluded,
            window_excluded_from=design.window_excluded_from,
        ),
        smearing=smearing_factor(estimate.resid) if log_form else None,
        candidate_scores=candidate_scores,
    )


def fit_demand(
    history: History,
    spec: ModelSpec,
    *,
    holdout_periods: int | None = None,
    previous_form: str | None = None,
) -> DemandFit:
    """Fit one product's demand model.

    Parameters
    ----------
    history : History
        The product's sales history.
    spec : ModelSpec
        What to fit. ``form="auto"`` scores the candidate forms by rolling-origin
        WAPE first and fits the best, unless forms are within the noise of that score:
        then the steady choice of :func:`models.select.steady_form` decides.
    holdout_periods : int, optional
        Last periods left out to compute ``quality.holdout_wape``; default
        ``min(13, rows // 4)`` when the rest still suffices, else no holdout.
    previous_form : str, optional
        Under ``auto``: the form of the product's earlier fit, kept when the scores
        cannot tell it from the best.

    Returns
    -------
    DemandFit

    Raises
    ------
    InsufficientDataError
        Fewer usable observations than the model needs (the message says how many more).
    UnusableDataError
        The own price never varies, a log term meets a non-positive value, or a named
        variable is missing.

    Examples
    --------
    >>> import numpy as np
    >>> from models.history import History
    >>> rng = np.random.default_rng(0)
    >>> price = rng.uniform(3, 6, 60)
    >>> units = np.exp(5 - 1.5 * np.log(price) + rng.normal(0, 0.1, 60))
    >>> periods = np.arange("2024-01-01", 60 * 7, 7, dtype="datetime64[D]")[:60]
    >>> h = History("TEA-1", periods, price, units, np.full(60, np.nan), np.ones(60, bool))
    >>> fit = fit_demand(h, ModelSpec(form="log-log"))
    >>> round(fit.own_price.estimate, 1)
    -1.5
    """
    scores: dict[str, float | None] = {}
    form = spec.form
    if form == "auto":
        scored = score_forms_by_fold([history], spec)[0]
        if isinstance(scored, Exception):
            raise scored
        scores = scored.overall
        form = steady_form(scored, previous_form)
    return _fit_form(history, spec, form, holdout_periods=holdout_periods, scores=scores)


def _fit_form(
    history: History,
    spec: ModelSpec,
    form: str,
    *,
    holdout_periods: int | None,
    scores: dict[str, float | None],
) -> DemandFit:
    """One product in a chosen form: the reference path every batched figure equals."""
    design = build_design(history, spec, form)
    check_size(design)
    holdout = holdout_size(design, holdout_periods)
    fitted = fit_design(design, spec)
    holdout_wape = holdout_wapes([design], [holdout], spec)[0] if holdout else None
    return _assemble(
        fitted, spec, holdout_periods=holdout, holdout_wape=holdout_wape, candidate_scores=scores
    )


def _failure(sku: str, error: Exception) -> FitFailure:
    if isinstance(error, InsufficientDataError):
        return FitFailure(sku, str(error), type(error).__name__, error.n_obs, error.n_required)
    return FitFailure(sku, str(error), type(error).__name__)


def fit_many(
    histories: Sequence[History],
    spec: ModelSpec,
    *,
    holdout_periods: int | None = None,
    families: Mapping[str, str] | None = None,
    previous_forms: Mapping[str, str] | None = None,
) -> list[DemandFit | FitFailure]:
    """Fit many products that share a spec; one result per history, in order.

    Statistics equal :func:`fit_demand`'s. A product that cannot be fitted becomes a
    :class:`FitFailure` and never stops the batch; rank-deficient terms are dropped
    per product and reported in that product's warnings.

    The least-squares forms of products with the same window length are fitted
    together as stacks of arrays (hold-out WAPE, diagnostics, warnings and records
    included); products needing more care (exclusions that leave too few periods,
    terms to drop, poisson, instruments) are fitted one by one. The cyclic garbage
    collector is paused while the records are built (they hold no reference cycles).

    Parameters
    ----------
    histories : sequence of History
    spec : ModelSpec
    holdout_periods : int, optional
        As in :func:`fit_demand`.
    families : mapping of sku to family, optional
        Used when ``spec.pooling == "family"``; without it the whole batch is one family.
    previous_forms : mapping of sku to form, optional
        Under ``auto``: each product's earlier form (see :func:`fit_demand`).

    Examples
    --------
    >>> fits = fit_many([], ModelSpec())
    >>> fits
    []
    """
    n = len(histories)
    results: list[DemandFit | FitFailure | None] = [None] * n
    forms = [spec.form] * n
    scores: list[dict[str, float | None]] = [{} for _ in range(n)]
    if spec.form == "auto":
        previous = previous_forms or {}
        for i, scored in enumerate(score_forms_by_fold(histories, spec)):
            if isinstance(scored, Exception):
                results[i] = _failure(histories[i].sku, scored)
            else:
                scores[i] = scored.overall
                forms[i] = steady_form(scored, previous.get(histories[i].sku))

    by_form: dict[str, list[int]] = defaultdict(list)
    for i in range(n):
        if results[i] is None:
            by_form[forms[i]].append(i)
    for form, members in by_form.items():
        stacked: list[DemandFit | None] = [None] * len(members)
        if stacked_path_applies(spec, form):
            stacked = fit_stacked(
                [histories[i] for i in members],
                spec,
                form,
                holdout_periods=holdout_periods,
                candidate_scores=[scores[i] for i in members],
            )
        for i, fit in zip(members, stacked, strict=True):
            if fit is not None:
                results[i] = fit
                continue
            try:
                results[i] = _fit_form(
                    histories[i], spec, form, holdout_periods=holdout_periods, scores=scores[i]
                )
            except (ValueError, np.linalg.LinAlgError) as error:
                results[i] = _failure(histories[i].sku, error)
    final: list[DemandFit | FitFailure] = [r for r in results if r is not None]
    assert len(final) == n
    if spec.pooling == "family":
        from models.pooling import pool_family

        fits = [r for r in final if isinstance(r, DemandFit)]
        pooled = {f.sku: f for f in pool_family(fits, families=families)}
        final = [pooled.get(r.sku, r) if isinstance(r, DemandFit) else r for r in final]
    return final
