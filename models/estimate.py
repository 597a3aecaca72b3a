"""Estimators for one product: the OLS stack sliced per product, Poisson PML, and 2SLS.

Each returns an :class:`Estimate`, the common currency from which a
:class:`~models.fit.DemandFit` is assembled, whatever the form.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import special, stats

from models._typing import FloatArray
from models.ols import (
    OLSStack,
    durbin_watson,
    fit_ols_stack,
    jarque_bera_p,
    t_two_sided_p,
)
from models.sandwich import LEVERAGE_KINDS, newey_west_lags, sandwich_meat


@dataclass(frozen=True)
class Estimate:
    """Coefficients, covariance and fit statistics of one product (internal)."""

    params: FloatArray
    cov: FloatArray
    resid: FloatArray
    df_resid: int
    use_t: bool
    r_squared: float | None
    adj_r_squared: float | None
    f_stat: float | None
    f_p_value: float | None
    sigma: float
    aic: float | None
    bic: float | None
    vif: FloatArray
    condition_number: float
    durbin_watson: float | None
    breusch_pagan_p: float | None
    jarque_bera_p: float | None
    first_stage_f: float | None = None
    endogeneity_p: float | None = None

    @property
    def bse(self) -> FloatArray:
        result: FloatArray = np.sqrt(np.diag(self.cov))
        return result

    def critical_value(self, level: float = 0.95) -> float:
        """Two-sided critical value (t with the residual df, or normal)."""
        return critical_value(level, self.df_resid if self.use_t else None)

    def pvalues(self) -> FloatArray:
        # An exact fit has zero standard errors: t is infinite and p is 0, not an error.
        with np.errstate(divide="ignore", invalid="ignore"):
            tvalues = self.params / self.bse
        if self.use_t:
            return t_two_sided_p(tvalues, self.df_resid)
        result: FloatArray = 2.0 * special.ndtr(-np.abs(tvalues))
        return result


def critical_value(level: float, df: int | None) -> float:
    """Two-sided critical value at ``level``: Student's t with ``df``, or normal when None."""
    q = 0.5 + level / 2.0
    return float(special.ndtri(q) if df is None else special.stdtrit(df, q))


def _opt(value: float | np.floating) -> float | None:
    value = float(value)
    return value if np.isfinite(value) else None


def estimate_from_stack(stack: OLSStack, i: int) -> Estimate:
    """The ``i``-th product of an OLS stack."""
    return Estimate(
        params=stack.params[i],
        cov=stack.cov[i],
        resid=stack.resid[i],
        df_resid=stack.df_resid,
        use_t=True,
        r_squared=_opt(stack.r_squared[i]),
        adj_r_squared=_opt(stack.adj_r_squared[i]),
        f_stat=_opt(stack.f_stat[i]),
        f_p_value=_opt(stack.f_p_value[i]),
        sigma=float(stack.sigma[i]),
        aic=_opt(stack.aic[i]),
        bic=_opt(stack.bic[i]),
        vif=stack.vif[i],
        condition_number=float(stack.condition_number[i]),
        durbin_watson=_opt(stack.durbin_watson[i]),
        breusch_pagan_p=_opt(stack.breusch_pagan_p[i]),
        jarque_bera_p=_opt(stack.jarque_bera_p[i]),
    )


def collinearity(design: FloatArray) -> tuple[FloatArray, float, bool]:
    """VIFs (NaN for the intercept), scaled condition number and singularity flag of a design."""
    n = design.shape[0]
    probe = fit_ols_stack(design[None], np.linspace(0.0, 1.0, n)[None], method="qr")
    return probe.vif[0], float(probe.condition_number[0]), bool(probe.rank_deficient.size)


def wald_f(params: FloatArray, cov: FloatArray, index: list[int]) -> float:
    """Wald statistic for ``params[index] == 0`` divided by the number of restrictions."""
    b = params[index]
    v = cov[np.ix_(index, index)]
    return float(b @ np.linalg.solve(v, b) / len(index))


def _sandwich(
    design: FloatArray,
    resid: FloatArray,
    bread: FloatArray,
    cov_type: str,
    hac_lags: int | None,
    leverage: FloatArray | None = None,
) -> FloatArray:
    meat = sandwich_meat(
        design[None],
        resid[None],
        cov_type=cov_type,
        leverage=None if leverage is None or cov_type not in LEVERAGE_KINDS else leverage[None],
        hac_lags=hac_lags,
    )[0]
    with np.errstate(invalid="ignore"):  # a NaN meat (see sandwich_meat) stays NaN
        result: FloatArray = bread @ meat @ bread
    return 0.5 * (result + result.T)


def _scaled_inverse_gram(design: FloatArray) -> FloatArray:
    """``inv(X'X)`` through QR of the column-scaled design."""
    norms = np.linalg.norm(design, axis=0)
    _, r = np.linalg.qr(design / norms)
    r_inv = np.linalg.inv(r)
    result: FloatArray = (r_inv @ r_inv.T) / norms[:, None] / norms[None, :]
    return result


def fit_poisson(
    design: FloatArray,
    units: FloatArray,
    *,
    cov_type: str,
    hac_lags: int | None = None,
    tol: float = 1e-13,
    max_iter: int = 100,
) -> Estimate:
    """Poisson pseudo-maximum likelihood by iteratively reweighted least squares.

    Zero-unit periods are kept (Santos Silva & Tenreyro 2006). ``classical`` uses
    the model-based information matrix (scale 1, as statsmodels GLM); ``hc0``-``hc3``
    and ``hac`` use sandwich forms on the score ``x (y - mu)`` (:mod:`models.sandwich`),
    HC2 and HC3 with the leverages of the weighted design.
    """
    n, k = design.shape
    mu = (units + units.mean()) / 2.0
    eta = np.log(mu)
    deviance = np.inf
    for _ in range(max_iter):
        weight = mu
        working = eta + (units - mu) / mu
        root = np.sqrt(weight)
        params = np.linalg.lstsq(design * root[:, None], working * root, rcond=None)[0]
        eta = design @ params
        mu = np.exp(eta)
        new_deviance = _poisson_deviance(units, mu)
        if abs(new_deviance - deviance) <= tol * (abs(new_deviance) + tol):
            deviance = new_deviance
            break
        deviance = new_deviance
    info_inv = _scaled_inverse_gram(design * np.sqrt(mu)[:, None])
    resid = units - mu
    if cov_type == "classical":
        cov = info_inv
    else:
        weighted = design * np.sqrt(mu)[:, None]
        leverage = np.einsum("ij,jk,ik->i", weighted, info_inv, weighted)
        cov = _sandwich(design, resid, info_inv, cov_type, hac_lags, leverage)
    df_resid = n - k
    null_deviance = _poisson_deviance(units, np.full(n, units.mean()))
    llf = float(np.sum(special.xlogy(units, mu) - mu - special.gammaln(units + 1.0)))
    pearson = resid / np.sqrt(mu)
    slopes = list(range(1, k))
    f_stat = wald_f(params, cov, slopes)
    vif, condition, _ = collinearity(design)
    return Estimate(
        params=params,
        cov=cov,
        resid=resid,
        df_resid=df_resid,
        use_t=False,
        r_squared=_opt(1.0 - deviance / null_deviance),
        adj_r_squared=None,
        f_stat=_opt(f_stat),
        f_p_value=_opt(stats.f.sf(f_stat, k - 1, df_resid)),
        sigma=float(np.sqrt(np.sum(pearson**2) / df_resid)),
        aic=-2.0 * llf + 2.0 * k,
        bic=-2.0 * llf + float(np.log(n)) * k,
        vif=vif,
        condition_number=condition,
        durbin_watson=_opt(durbin_watson(pearson[None])[0]),
        breusch_pagan_p=None,
        jarque_bera_p=None,
    )


def _poisson_deviance(units: FloatArray, mu: FloatArray) -> float:
    return float(2.0 * np.sum(special.xlogy(units, units / mu) - (units - mu)))


def fit_iv(
    design: FloatArray,
    response: FloatArray,
    instruments: FloatArray,
    *,
    cov_type: str,
    hac_lags: int | None = None,
) -> Estimate:
    """Two-stage least squares with column 1 of ``design`` (the own price) endogenous.

    The first-stage F is the Wald test that the excluded instruments' coefficients
    are zero; the endogeneity test is the regression-based Wu-Hausman test (the
    first-stage residual added to the structural equation). Both use ``cov_type``,
    so with ``classical`` they equal the textbook (Stata ``ivreg``/R ``ivreg``) figures.
    """
    n, k = design.shape
    q = instruments.shape[1]
    exogenous = np.delete(design, 1, axis=1)
    price = design[:, 1]
    first = fit_ols_stack(
        np.column_stack([exogenous, instruments])[None],
        price[None],
        cov_type=cov_type,
        hac_lags=hac_lags,
        method="qr",
    )
    first_resid = first.resid[0]
    first_f = wald_f(first.params[0], first.cov[0], list(range(k - 1, k - 1 + q)))
    projected = design.copy()
    projected[:, 1] = price - first_resid
    second = fit_ols_stack(projected[None], response[None], method="qr")
    params = second.params[0]
    resid = response - design @ params
    ssr = float(resid @ resid)
    df_resid = n - k
    sigma2 = ssr / df_resid
    bread = _scaled_inverse_gram(projected)
    if cov_type == "classical":
        cov = sigma2 * bread
    else:
        # HC2 and HC3 take the leverages of the second-stage (projected) design.
        leverage = np.einsum("ij,jk,ik->i", projected, bread, projected)
        cov = _sandwich(projected, resid, bread, cov_type, hac_lags, leverage)

    augmented = fit_ols_stack(
        np.column_stack([design, first_resid])[None],
        response[None],
        cov_type=cov_type,
        hac_lags=hac_lags,
        method="qr",
    )
    hausman_f = augmented.tvalues[0, -1] ** 2
    endogeneity_p = float(stats.f.sf(hausman_f, 1, augmented.df_resid))

    centred = response - response.mean()
    r_squared = 1.0 - ssr / float(centred @ centred)
    f_stat = wald_f(params, cov, list(range(1, k)))
    vif, condition, _ = collinearity(design)
    het = fit_ols_stack(design[None], (resid**2)[None], method="qr")
    bp_p = float(stats.chi2.sf(n * het.r_squared[0], k - 1))
    return Estimate(
        params=params,
        cov=cov,
        resid=resid,
        df_resid=df_resid,
        use_t=True,
        r_squared=r_squared,
        adj_r_squared=1.0 - (1.0 - r_squared) * (n - 1) / df_resid,
        f_stat=_opt(f_stat),
        f_p_value=_opt(stats.f.sf(f_stat, k - 1, df_resid)),
        sigma=float(np.sqrt(sigma2)),
        aic=None,
        bic=None,
        vif=vif,
        condition_number=condition,
        durbin_watson=_opt(durbin_watson(resid[None])[0]),
        breusch_pagan_p=_opt(bp_p),
        jarque_bera_p=_opt(jarque_bera_p(resid[None])[0]),
        first_stage_f=_opt(first_f),
        endogeneity_p=_opt(endogeneity_p),
    )


__all__ = ["Estimate", "collinearity", "fit_iv", "fit_poisson", "newey_west_lags"]
