"""Fit records of a stack's members, built from whole arrays turned into lists."""

from __future__ import annotations

from collections.abc import Sequence
from itertools import compress

import numpy as np

from models._typing import FloatArray, IntArray
from models.batch.arrays import finite_rows, optional_floats, row_mappings
from models.batch.layout import Layout, Plan
from models.checks import (
    MIN_OBS_PER_TERM,
    MIN_PRICE_CV,
    NEAR_COLLINEAR_CONDITION,
    SIGNIFICANCE,
    VIF_LIMIT,
    equation_text,
    warnings_from_figures,
)
from models.design import PRICE, event_covariates
from models.estimate import critical_value
from models.history import History
from models.ols import OLSStack
from models.result import (
    Coefficient,
    DataWindow,
    DemandFit,
    Diagnostics,
    FitWarning,
    Quality,
    build_records,
    note_plain_numbers,
)


def stack_records(
    layout: Layout,
    histories: Sequence[History],
    stack: OLSStack,
    x: FloatArray,
    plan: Plan,
    members: IntArray,
    variables: dict[str, FloatArray],
    first_days: list[str],
    last_days: list[str],
    wapes: list[float | None],
    scores: list[dict[str, float | None]],
) -> list[DemandFit]:
    """One fit record per stack member, from per-stack arrays turned into lists."""
    terms, form, spec, names = layout.terms, layout.form, layout.spec, layout.names
    b, k = stack.params.shape
    params, bse, pvalues, vif = stack.params, stack.bse, stack.pvalues, stack.vif
    with np.errstate(divide="ignore", invalid="ignore"):
        tstat = np.where(bse > 0, params / bse, np.nan)
    crit = critical_value(0.95, stack.df_resid)

    price = variables[PRICE]
    price_mean = price.mean(axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        price_cv = np.where(price_mean > 0, np.std(price, axis=1) / price_mean, 0.0)
    n_usable = plan.n_usable[members]
    n_stockouts = plan.n_stockouts[members]
    n_zero = plan.n_zero[members]
    n_missing = plan.n_missing[members]
    owners = [histories[i] for i in plan.ok[members].tolist()]
    n_excluded = [h.n_periods - layout.width for h in owners]
    excluded_from = [
        str(h.periods[0]) if n else None for h, n in zip(owners, n_excluded, strict=True)
    ]
    condition = stack.condition_number
    flagged = (
        (params[:, 1] > 0.0)
        | ~(pvalues[:, 1] < SIGNIFICANCE)
        | (n_usable < MIN_OBS_PER_TERM * k)
        | (price_cv < MIN_PRICE_CV)
        | (np.isfinite(vif) & (vif > VIF_LIMIT)).any(axis=1)
        | (n_stockouts > 0)
        | (n_zero > 0)
        | (n_missing > 0)
        | (np.asarray(n_excluded) > 0)
        | (np.isfinite(condition) & (condition > NEAR_COLLINEAR_CONDITION))
    )
    warnings: list[tuple[FitWarning, ...]] = [()] * b
    for i in np.flatnonzero(flagged).tolist():
        warnings[i] = warnings_from_figures(
            form=form,
            terms=terms,
            own_coef=float(params[i, 1]),
            own_p_value=float(pvalues[i, 1]),
            n_obs=int(n_usable[i]),
            price_cv=float(price_cv[i]),
            vifs=vif[i].tolist(),
            n_stockouts=int(n_stockouts[i]),
            n_window=layout.width,
            n_zero_dropped=int(n_zero[i]),
            n_missing=int(n_missing[i]),
            condition_number=float(condition[i]),
            n_window_excluded=n_excluded[i],
            window_excluded_from=excluded_from[i],
        )

    var_names = list(variables)
    var_means = np.stack([v.mean(axis=1) for v in variables.values()], axis=1)
    var_latest = np.stack([v[:, -1] for v in variables.values()], axis=1)
    reg_names = names[1:]
    reg_means, reg_latest = x.mean(axis=2)[:, 1:], x[:, 1:, -1]
    ci_low, ci_high = params - crit * bse, params + crit * bse
    price_low, price_high = price.min(axis=1), price.max(axis=1)
    smearing = np.exp(stack.resid).mean(axis=1) if layout.log_response else np.zeros(b)
    vif_values = vif.astype(object)
    vif_values[:, 0] = None
    vif_values[~np.isfinite(vif)] = None
    # Every member's coefficient rows in one run of b * k, then k at a time per member.
    coefficients = build_records(
        Coefficient,
        b * k,
        {
            "term": names * b,
            "estimate": params.ravel().tolist(),
            "std_error": bse.ravel().tolist(),
            "t_stat": tstat.ravel().tolist(),
            "p_value": pvalues.ravel().tolist(),
            "ci_low": ci_low.ravel().tolist(),
            "ci_high": ci_high.ravel().tolist(),
            "vif": vif_values.ravel().tolist(),
        },
    )
    cov_rows = zip(*[iter(stack.cov.ravel().tolist())] * k, strict=True)
    n_obs = n_usable.tolist()
    quality = build_records(
        Quality,
        b,
        {
            "n_obs": n_obs,
            "r_squared": optional_floats(stack.r_squared),
            "adj_r_squared": optional_floats(stack.adj_r_squared),
            "f_stat": optional_floats(stack.f_stat),
            "f_p_value": optional_floats(stack.f_p_value),
            "sigma": stack.sigma.tolist(),
            "aic": optional_floats(stack.aic),
            "bic": optional_floats(stack.bic),
            "holdout_wape": wapes,
        },
    )
    diagnostics = build_records(
        Diagnostics,
        b,
        {
            "condition_number": optional_floats(stack.condition_number),
            "durbin_watson": optional_floats(stack.durbin_watson),
            "breusch_pagan_p": optional_floats(stack.breusch_pagan_p),
            "jarque_bera_p": optional_floats(stack.jarque_bera_p),
        },
        {"first_stage_f": None, "endogeneity_p": None},
    )
    window = build_records(
        DataWindow,
        b,
        {
            "first_period": first_days,
            "last_period": last_days,
            "n_obs": n_obs,
            "n_stockouts_excluded": n_stockouts.tolist(),
            "n_zero_units_dropped": n_zero.tolist(),
            "n_missing_dropped": n_missing.tolist(),
            "holdout_periods": plan.holdout[members].tolist(),
            "n_window_excluded": n_excluded,
            "window_excluded_from": excluded_from,
        },
        {"n_window": layout.width},
    )
    fits = build_records(
        DemandFit,
        b,
        {
            "sku": [histories[i].sku for i in plan.ok[members].tolist()],
            "coefficients": list(zip(*[iter(coefficients)] * k, strict=True)),
            "covariance": list(zip(*[cov_rows] * k, strict=True)),
            "quality": quality,
            "diagnostics": diagnostics,
            "warnings": warnings,
            "equation": _equations(layout, params),
            "variable_means": row_mappings(var_names, var_means),
            "variable_latest": row_mappings(var_names, var_latest),
            "regressor_means": row_mappings(reg_names, reg_means),
            "regressor_latest": row_mappings(reg_names, reg_latest),
            "price_range": list(zip(price_low.tolist(), price_high.tolist(), strict=True)),
            "window": window,
            "smearing": smearing.tolist() if layout.log_response else [None] * b,
            "candidate_scores": scores,
            "variable_events": event_covariates(spec.covariates, variables),
        },
        {
            "spec": spec,
            "form": form,
            "terms": terms,
            "df_resid": stack.df_resid,
            "use_t": True,
            "pooled": None,
        },
    )
    # Figures that are not already None where undefined are plain floats from the
    # arrays; where all of those are finite, to_dict need not look at them again.
    plain = (
        finite_rows(params, bse, tstat, pvalues, ci_low, ci_high, stack.cov)
        & finite_rows(var_means, var_latest, reg_means, reg_latest)
        & finite_rows(stack.sigma, price_low, price_high, smearing)
    )
    note_plain_numbers(compress(fits, plain.tolist()))
    return fits


def _equations(layout: Layout, params: FloatArray) -> list[str]:
    """``equation_text`` of every member, each formatted through one template."""
    b, k = params.shape
    values = np.empty((b, 2 * k - 1), dtype=object)
    values[:, 0] = params[:, 0]
    values[:, 1::2] = np.where(params[:, 1:] < 0, "-", "+")
    values[:, 2::2] = np.abs(params[:, 1:])
    equations: list[str] = list(map(layout.equation.__mod__, map(tuple, values.tolist())))
    for i in np.flatnonzero(~np.isfinite(params).all(axis=1)).tolist():
        equations[i] = equation_text(layout.form, layout.terms, params[i].tolist())
    return equations
