"""Elasticities of expected demand with delta-method standard errors.

Every elasticity is ``d ln E[units] / d ln x`` at a point. For the log-response
forms (log-log, semi-log, poisson) a log term's coefficient is the elasticity and a
level term's is ``b * x``. For the linear form it is ``b * x / units_hat`` with the
predicted units at the same point (``b / units_hat`` for a log covariate); its
standard error comes from the gradient with respect to all coefficients, because
``units_hat`` depends on them too.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any, Final

import numpy as np

from models._typing import FloatArray
from models.result import DemandFit, PooledElasticity, clean

UNIT_ELASTIC_BAND: Final = 0.1
"""Own-price elasticities within this distance of -1 are called unit-elastic (our convention)."""


@dataclass(frozen=True)
class ElasticityRow:
    """One elasticity; ``kind``: own, cross or covariate; ``classification``: plain words."""

    name: str
    kind: str
    value: float
    std_error: float
    ci_low: float
    ci_high: float
    classification: str | None

    def to_dict(self) -> dict[str, Any]:
        out = dict(clean({k: v for k, v in vars(self).items() if k != "classification"}))
        out["class"] = self.classification
        return out


@dataclass(frozen=True)
class ElasticityReport:
    """Elasticities of one fit at one point."""

    sku: str
    form: str
    at: str
    point: dict[str, float]
    level: float
    rows: tuple[ElasticityRow, ...]
    pooled: PooledElasticity | None = None

    def row(self, name: str) -> ElasticityRow:
        """The row of a variable (``"price"``, a covariate or a sku)."""
        for row in self.rows:
            if row.name == name:
                return row
        raise KeyError(name)

    @property
    def own(self) -> ElasticityRow:
        return self.rows[0]

    def to_dict(self) -> dict[str, Any]:
        return {
            "sku": self.sku,
            "form": self.form,
            "at": self.at,
            "point": clean(self.point),
            "level": self.level,
            "rows": [r.to_dict() for r in self.rows],
            "pooled": None if self.pooled is None else clean(vars(self.pooled)),
        }


def point_values(
    fit: DemandFit, at: str | Mapping[str, float]
) -> tuple[str, dict[str, float], dict[str, float]]:
    """Variable values and fixed-term values of the point ``at``."""
    if isinstance(at, str):
        if at == "mean":
            return at, dict(fit.variable_means), dict(fit.regressor_means)
        if at == "latest":
            return at, dict(fit.variable_latest), dict(fit.regressor_latest)
        raise ValueError(f"at must be 'mean', 'latest' or a mapping of values; got {at!r}")
    unknown = set(at) - set(fit.variable_means)
    if unknown:
        raise ValueError(
            f"unknown variables {sorted(unknown)}; known: {sorted(fit.variable_means)}"
        )
    return (
        "given",
        {**fit.variable_means, **{k: float(v) for k, v in at.items()}},
        dict(fit.regressor_means),
    )


def design_row(
    fit: DemandFit, variables: Mapping[str, float], fixed: Mapping[str, float]
) -> FloatArray:
    """The design row of a point (intercept, variable terms, seasonal and trend terms)."""
    row = []
    for term in fit.terms:
        if term.kind == "intercept":
            row.append(1.0)
        elif term.source is not None:
            row.append(term.column(variables[term.source]))
        else:
            row.append(fixed[term.name])
    return np.array(row)


def critical_value(fit: DemandFit, level: float) -> float:
    from scipy import stats

    q = 0.5 + level / 2.0
    return float(stats.t.ppf(q, fit.df_resid) if fit.use_t else stats.norm.ppf(q))


def own_price_class(value: float, low: float, high: float) -> str:
    """Plain words for an own-price elasticity and its 95% interval ``[low, high]``.

    ``wrong sign`` when the whole interval lies above 0 (demand rising with price);
    ``elastic`` when it lies below -1 and ``inelastic`` when it lies between -1 and 0;
    ``unit-elastic`` when it lies within ``UNIT_ELASTIC_BAND`` of -1; otherwise
    (the interval spans -1, or spans 0 with the estimate above it) ``unclear``.
    Without a finite interval the estimate alone decides, as before intervals existed.

    Examples
    --------
    >>> own_price_class(-3.35, -11.9, 5.24)
    'unclear'
    >>> own_price_class(-2.1, -2.6, -1.6), own_price_class(-0.5, -0.8, -0.2)
    ('elastic', 'inelastic')
    >>> own_price_class(0.6, 0.2, 1.0)
    'wrong sign'
    """
    if not (np.isfinite(low) and np.isfinite(high)):
        low = high = value
    if low > 0.0:
        return "wrong sign"
    band = UNIT_ELASTIC_BAND
    if -1.0 - band <= low and high <= -1.0 + band:
        return "unit-elastic"
    if high < -1.0:
        return "elastic"
    if low > -1.0 and value <= 0.0:
        return "inelastic"
    return "unclear"


def _classify(
    kind: str, name: str, value: float, low: float, high: float, income_like: set[str]
) -> str | None:
    if not np.isfinite(value):
        return None
    if kind == "own":
        return own_price_class(value, low, high)
    if kind == "cross":
        if low > 0.0:
            return "substitute"
        if high < 0.0:
            return "complement"
        return "no clear relation"
    if name in income_like:
        if value < 0.0:
            return "inferior"
        return "necessity" if value < 1.0 else "luxury"
    return None


def elasticities(
    fit: DemandFit,
    *,
    at: str | Mapping[str, float] = "mean",
    income_like: Sequence[str] = (),
    level: float = 0.95,
) -> ElasticityReport:
    """Own-price, cross-price and covariate elasticities of a fit.

    Parameters
    ----------
    fit : DemandFit
        A fit (also one restored with :meth:`DemandFit.from_dict`).
    at : "mean", "latest" or mapping
        The point: means over the fitted periods, the latest fitted period, or given
        values (unnamed variables stay at their means).
    income_like : sequence of str
        Covariates to classify as inferior / necessity / luxury.
    level : float
        Confidence level of the intervals.

    Returns
    -------
    ElasticityReport
        Rows: own price first, then cross prices, then covariates.

    Examples
    --------
    >>> import numpy as np
    >>> from models import History, ModelSpec, fit_demand
    >>> rng = np.random.default_rng(1)
    >>> price = rng.uniform(3, 6, 52)
    >>> periods = np.arange("2024-01-01", 52 * 7, 7, dtype="datetime64[D]")[:52]
    >>> units = 200 - 25 * price + rng.normal(0, 2, 52)
    >>> h = History("TEA-2", periods, price, units, np.full(52, np.nan), np.ones(52, bool))
    >>> report = elasticities(fit_demand(h, ModelSpec(form="linear")), at="mean")
    >>> report.own.classification
    'elastic'
    """
    label, variables, fixed = point_values(fit, at)
    a = design_row(fit, variables, fixed)
    params, cov = fit.params, fit.cov
    crit = critical_value(fit, level)
    linear = fit.form == "linear"
    units_hat = float(a @ params)
    income = set(income_like)
    kinds = {"own_price": "own", "cross_price": "cross", "covariate": "covariate"}
    rows = []
    for j, term in enumerate(fit.terms):
        if term.kind not in kinds or term.source is None:
            continue
        b, x = float(params[j]), variables[term.source]
        unit = np.zeros(len(params))
        unit[j] = 1.0
        slope = unit if term.transform == "log" else x * unit
        effect = b if term.transform == "log" else b * x
        if linear:
            value = effect / units_hat if units_hat > 0 else float("nan")
            grad = slope / units_hat - effect * a / units_hat**2
        else:
            value, grad = effect, slope
        se = float(np.sqrt(grad @ cov @ grad)) if np.isfinite(value) else float("nan")
        low, high = value - crit * se, value + crit * se
        kind = kinds[term.kind]
        rows.append(
            ElasticityRow(
                name=term.source,
                kind=kind,
                value=value,
                std_error=se,
                ci_low=low,
                ci_high=high,
                classification=_classify(kind, term.source, value, low, high, income),
            )
        )
    return ElasticityReport(
        sku=fit.sku,
        form=fit.form,
        at=label,
        point=variables,
        level=level,
        rows=tuple(rows),
        pooled=fit.pooled,
    )
