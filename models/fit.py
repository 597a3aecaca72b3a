"""Fit demand models: one product (:func:`fit_demand`) or many sharing a spec (:func:`fit_many`).

Both paths produce identical statistics; the batched one solves all products of
equal history length as one stack. Reported coefficients always use every
usable period; ``holdout_wape`` comes from a separate fit that leaves out the
last periods and predicts them.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import Final

import numpy as np

from models.checks import equation_text, fit_warnings
from models.design import Design, build_design
from models.engine import FittedDesign, check_size, fit_design, fit_designs, head, required_obs
from models.errors import InsufficientDataError
from models.forecast import expected_units, smearing_factor, wape
from models.history import History
from models.result import (
    Coefficient,
    DataWindow,
    DemandFit,
    Diagnostics,
    FitFailure,
    Quality,
)
from models.select import choose_form, score_forms
from models.spec import LOG_RESPONSE_FORMS, ModelSpec

DEFAULT_HOLDOUT: Final = 13
"""Periods held out for ``holdout_wape`` by default (a quarter of weekly data).

Never more than a quarter of the rows."""


def _holdout_size(design: Design, requested: int | None) -> int:
    rows = design.regressors.shape[0]
    need = required_obs(len(design.terms))
    if requested is None:
        size = min(DEFAULT_HOLDOUT, rows // 4)
        return size if size > 0 and int(design.usable[: rows - size].sum()) >= need else 0
    if requested < 0:
        raise ValueError("holdout_periods must not be negative")
    if requested and int(design.usable[: max(rows - requested, 0)].sum()) < need:
        raise InsufficientDataError(
            design.sku,
            int(design.usable[: max(rows - requested, 0)].sum()),
            need,
            f"after holding out the last {requested} periods",
        )
    return requested


def _holdout_wapes(
    designs: Sequence[Design], sizes: Sequence[int], spec: ModelSpec
) -> list[float | None]:
    members = [i for i, h in enumerate(sizes) if h > 0]
    out: list[float | None] = [None] * len(designs)
    train = [head(designs[i], designs[i].regressors.shape[0] - sizes[i]) for i in members]
    for i, result in zip(members, fit_designs(train, spec), strict=True):
        if not isinstance(result, FittedDesign):
            continue
        design, start = designs[i], designs[i].regressors.shape[0] - sizes[i]
        smearing = (
            smearing_factor(result.estimate.resid) if design.form in LOG_RESPONSE_FORMS else None
        )
        rows = design.regressors[start:][:, list(result.kept)]
        predicted = expected_units(design.form, rows, result.estimate.params, smearing)
        score = wape(design.units[start:], predicted)
        out[i] = score if np.isfinite(score) else None
    return out


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
    var_names = list(design.variables)
    var_values = np.column_stack([design.variables[k][usable] for k in var_names])
    var_means = dict(zip(var_names, var_values.mean(axis=0).tolist(), strict=True))
    var_latest = dict(zip(var_names, var_values[-1].tolist(), strict=True))
    col_means = x.mean(axis=0).tolist()
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
        ),
        smearing=smearing_factor(estimate.resid) if log_form else None,
        candidate_scores=candidate_scores,
    )


def fit_demand(
    history: History, spec: ModelSpec, *, holdout_periods: int | None = None
) -> DemandFit:
    """Fit one product's demand model.

    Parameters
    ----------
    history : History
        The product's sales history.
    spec : ModelSpec
        What to fit. ``form="auto"`` scores the candidate forms by rolling-origin
        WAPE first and fits the best.
    holdout_periods : int, optional
        Last periods left out to compute ``quality.holdout_wape``; default
        ``min(13, rows // 4)`` when the rest still suffices, else no holdout.

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
        scored = score_forms([history], spec)[0]
        if isinstance(scored, Exception):
            raise scored
        scores = scored
        form = choose_form(scores)
    design = build_design(history, spec, form)
    check_size(design)
    holdout = _holdout_size(design, holdout_periods)
    fitted = fit_design(design, spec)
    holdout_wape = _holdout_wapes([design], [holdout], spec)[0] if holdout else None
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
) -> list[DemandFit | FitFailure]:
    """Fit many products that share a spec; one result per history, in order.

    Statistics equal :func:`fit_demand`'s. A product that cannot be fitted becomes a
    :class:`FitFailure` and never stops the batch; rank-deficient terms are dropped
    per product and reported in that product's warnings.

    Parameters
    ----------
    histories : sequence of History
    spec : ModelSpec
    holdout_periods : int, optional
        As in :func:`fit_demand`.
    families : mapping of sku to family, optional
        Used when ``spec.pooling == "family"``; without it the whole batch is one family.

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
        for i, scored in enumerate(score_forms(histories, spec)):
            if isinstance(scored, Exception):
                results[i] = _failure(histories[i].sku, scored)
            else:
                scores[i] = scored
                forms[i] = choose_form(scored)

    designs: dict[int, Design] = {}
    holdouts: dict[int, int] = {}
    for i, history in enumerate(histories):
        if results[i] is not None:
            continue
        try:
            design = build_design(history, spec, forms[i])
            check_size(design)
            holdouts[i] = _holdout_size(design, holdout_periods)
            designs[i] = design
        except ValueError as error:
            results[i] = _failure(history.sku, error)

    for form in sorted(set(forms)):
        members = [i for i in designs if forms[i] == form]
        if not members:
            continue
        form_spec = spec if spec.form != "auto" else spec.with_form(form)
        fitted = fit_designs([designs[i] for i in members], form_spec)
        wapes = _holdout_wapes(
            [designs[i] for i in members], [holdouts[i] for i in members], form_spec
        )
        for i, result, holdout_wape in zip(members, fitted, wapes, strict=True):
            if isinstance(result, Exception):
                results[i] = _failure(histories[i].sku, result)
            else:
                results[i] = _assemble(
                    result,
                    spec,
                    holdout_periods=holdouts[i],
                    holdout_wape=holdout_wape,
                    candidate_scores=scores[i],
                )
    final: list[DemandFit | FitFailure] = [r for r in results if r is not None]
    assert len(final) == n
    if spec.pooling == "family":
        from models.pooling import pool_family

        fits = [r for r in final if isinstance(r, DemandFit)]
        pooled = {f.sku: f for f in pool_family(fits, families=families)}
        final = [pooled.get(r.sku, r) if isinstance(r, DemandFit) else r for r in final]
    return final
