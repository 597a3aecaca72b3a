"""Least squares for a stack of products that share a design layout.

Every product in a stack has the same number of observations ``n`` and of
columns ``k`` (column 0 is the intercept). The regressors are centred, and the
centred cross-product is scaled to unit diagonal before solving, which makes it a
correlation matrix: Longley's design condition number drops from 5e9 to about
1e2 (1.2e4 for the cross-product), so normal equations followed by one step of
iterative refinement keep the certified digits while staying fully vectorised.
``method="qr"`` solves the same centred, scaled system by Householder QR instead.

Standard errors are computed in the centred coordinates, where the
cross-product matrix is block diagonal, and mapped back to the original
coefficients with the exact linear transformation. Residual and design
diagnostics are computed for the whole stack on first access.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property
from typing import Final

import numpy as np
from scipy import special

from models._typing import BoolArray, FloatArray, IntArray

RANK_VIF_LIMIT: Final = 1e10
"""A regressor whose variance inflation exceeds this is treated as exactly collinear."""


def newey_west_lags(n_obs: int) -> int:
    """Newey-West lag truncation ``floor(4 (n / 100) ** (2 / 9))``.

    The plug-in rule of thumb of Newey & West (1994, Review of Economic Studies 61,
    631-653); it gives 4 lags for two years of weekly data.
    """
    return int(np.floor(4.0 * (n_obs / 100.0) ** (2.0 / 9.0)))


def t_two_sided_p(tvalues: FloatArray, df: int) -> FloatArray:
    """Two-sided p-values of Student's t (``scipy.special.stdtr``, no distribution overhead)."""
    result: FloatArray = 2.0 * special.stdtr(df, -np.abs(tvalues))
    return result


@dataclass(frozen=True)
class OLSStack:
    """Estimates and statistics for a stack of ``b`` products (arrays lead with ``b``).

    ``vif``, ``condition_number``, ``durbin_watson``, ``breusch_pagan_p``,
    ``jarque_bera_p``, ``aic``, ``bic`` and ``llf`` are computed on first access.
    ``rank_deficient`` lists products whose design is (nearly) singular; their figures
    are not valid and they must be refitted without the offending terms.
    """

    params: FloatArray
    cov: FloatArray
    bse: FloatArray
    tvalues: FloatArray
    pvalues: FloatArray
    resid: FloatArray
    n_obs: int
    df_resid: int
    ssr: FloatArray
    r_squared: FloatArray
    adj_r_squared: FloatArray
    f_stat: FloatArray
    f_p_value: FloatArray
    sigma: FloatArray
    rank_deficient: IntArray
    _centred: FloatArray
    _means: FloatArray
    _cross_inv: FloatArray

    @cached_property
    def llf(self) -> FloatArray:
        n = self.n_obs
        # An exact fit (zero residuals) has an infinite likelihood; AIC/BIC become None.
        with np.errstate(divide="ignore"):
            result: FloatArray = -0.5 * n * (np.log(2.0 * np.pi) + np.log(self.ssr / n) + 1.0)
        return result

    @cached_property
    def aic(self) -> FloatArray:
        result: FloatArray = -2.0 * self.llf + 2.0 * self.params.shape[1]
        return result

    @cached_property
    def bic(self) -> FloatArray:
        result: FloatArray = -2.0 * self.llf + np.log(self.n_obs) * self.params.shape[1]
        return result

    @cached_property
    def vif(self) -> FloatArray:
        """Variance inflation factors (NaN for the intercept), as R's car::vif."""
        cross_diag = np.einsum("bnj,bnj->bj", self._centred, self._centred)
        inv_diag = np.diagonal(self._cross_inv, axis1=1, axis2=2)
        b = self.params.shape[0]
        return np.concatenate([np.full((b, 1), np.nan), cross_diag * inv_diag], axis=1)

    @cached_property
    def condition_number(self) -> FloatArray:
        """Condition number of the design scaled to unit column length (Belsley, Kuh & Welsch 1980).

        The uncentred cross-product is rebuilt from its centred parts (a sum of
        positive terms, so nothing cancels), scaled to unit diagonal, and its extreme
        eigenvalues give the squared condition number.
        """
        means, n = self._means, self.n_obs
        b, p = means.shape
        cross = np.empty((b, p + 1, p + 1))
        cross[:, 0, 0] = n
        cross[:, 0, 1:] = n * means
        cross[:, 1:, 0] = n * means
        cross[:, 1:, 1:] = np.matmul(self._centred.transpose(0, 2, 1), self._centred)
        cross[:, 1:, 1:] += n * means[:, :, None] * means[:, None, :]
        d = np.sqrt(np.diagonal(cross, axis1=1, axis2=2))
        eig = np.linalg.eigvalsh(cross / d[:, :, None] / d[:, None, :])
        with np.errstate(divide="ignore", invalid="ignore"):
            result: FloatArray = np.sqrt(eig[:, -1] / np.maximum(eig[:, 0], 0.0))
        return result

    @cached_property
    def durbin_watson(self) -> FloatArray:
        return durbin_watson(self.resid)

    @cached_property
    def jarque_bera_p(self) -> FloatArray:
        return jarque_bera_p(self.resid)

    @cached_property
    def breusch_pagan_p(self) -> FloatArray:
        """Koenker's studentised Breusch-Pagan test: n R^2 of resid^2 on the regressors."""
        n, p = self._centred.shape[1], self._centred.shape[2]
        e = self.resid**2
        ec = e - e.mean(axis=1, keepdims=True)
        g = _tv(self._centred, ec)
        explained = np.einsum("bj,bj->b", g, _mv(self._cross_inv, g))
        with np.errstate(divide="ignore", invalid="ignore"):
            lm = n * explained / np.einsum("bn,bn->b", ec, ec)
        result: FloatArray = special.chdtrc(p, lm)
        return result


def _mv(a: FloatArray, v: FloatArray) -> FloatArray:
    """Batched matrix-vector product ``a @ v`` for ``a`` (b, i, j) and ``v`` (b, j)."""
    result: FloatArray = np.matmul(a, v[:, :, None])[:, :, 0]
    return result


def _tv(a: FloatArray, v: FloatArray) -> FloatArray:
    """Batched ``a.T @ v`` for ``a`` (b, n, j) and ``v`` (b, n)."""
    result: FloatArray = np.matmul(v[:, None, :], a)[:, 0, :]
    return result


def _safe_inverse(gram: FloatArray) -> tuple[FloatArray, BoolArray]:
    """Invert a stack of Gram matrices; singular members get NaN and are flagged."""
    try:
        return np.asarray(np.linalg.inv(gram), dtype=np.float64), np.zeros(gram.shape[0], bool)
    except np.linalg.LinAlgError:
        inverse = np.empty_like(gram)
        failed: BoolArray = np.zeros(gram.shape[0], dtype=bool)
        for i in range(gram.shape[0]):
            try:
                inverse[i] = np.linalg.inv(gram[i])
            except np.linalg.LinAlgError:
                inverse[i] = np.nan
                failed[i] = True
        return inverse, failed


def sandwich_meat(
    scores_design: FloatArray,
    resid: FloatArray,
    *,
    cov_type: str,
    leverage: FloatArray | None = None,
    hac_lags: int | None = None,
) -> FloatArray:
    """The middle of a sandwich covariance for a stack, ``sum_t w_t x_t x_t'``-style.

    ``hc3`` weights squared residuals by ``1 / (1 - h)^2`` (MacKinnon & White 1985);
    ``hac`` uses Bartlett weights up to ``hac_lags`` (Newey & West 1987) with the
    small-sample factor ``n / (n - k)``, as statsmodels' ``use_correction=True``.
    """
    n, k = scores_design.shape[1], scores_design.shape[2]
    if cov_type == "hc3":
        if leverage is None:
            raise ValueError("hc3 needs the leverages")
        with np.errstate(divide="ignore", invalid="ignore"):
            # A period with leverage 1 (a flag set in one period only) has no HC3 weight:
            # the figures that depend on it become NaN rather than a misleading number.
            omega = resid**2 / (1.0 - leverage) ** 2
        meat_hc3: FloatArray = np.matmul(
            scores_design.transpose(0, 2, 1), scores_design * omega[:, :, None]
        )
        return meat_hc3
    if cov_type == "hac":
        lags = newey_west_lags(n) if hac_lags is None else hac_lags
        scores = scores_design * resid[:, :, None]
        meat = np.matmul(scores.transpose(0, 2, 1), scores)
        for lag in range(1, min(lags, n - 1) + 1):
            weight = 1.0 - lag / (lags + 1.0)
            cross = np.matmul(scores[:, lag:, :].transpose(0, 2, 1), scores[:, :-lag, :])
            meat += weight * (cross + cross.transpose(0, 2, 1))
        corrected: FloatArray = meat * (n / (n - k))
        return corrected
    raise ValueError(f"unknown robust covariance {cov_type!r}")


def fit_ols_stack(
    design: FloatArray,
    response: FloatArray,
    *,
    cov_type: str = "classical",
    hac_lags: int | None = None,
    method: str = "normal",
) -> OLSStack:
    """Fit ``response ~ design`` for every product of a stack at once.

    Parameters
    ----------
    design : FloatArray
        Shape (b, n, k); column 0 must be the intercept (all ones).
    response : FloatArray
        Shape (b, n).
    cov_type : str
        ``"classical"``, ``"hc3"`` or ``"hac"``.
    hac_lags : int, optional
        Newey-West truncation lag; default :func:`newey_west_lags`.
    method : str
        ``"normal"`` (centred and scaled normal equations plus one refinement step)
        or ``"qr"`` (Householder QR of the centred, scaled regressors).

    Returns
    -------
    OLSStack
        Figures for each product; ``rank_deficient`` lists products that need
        terms dropped before their figures can be trusted.

    Examples
    --------
    >>> x = np.arange(6.0)
    >>> design = np.stack([np.ones(6), x], axis=1)[None]
    >>> fit = fit_ols_stack(design, (2.0 + 3.0 * x)[None] + [[0.1, -0.1, 0, 0, 0.1, -0.1]])
    >>> bool(np.allclose(fit.params[0], [2.0, 3.0], atol=0.05))
    True
    """
    design = np.asarray(design, dtype=np.float64)
    response = np.asarray(response, dtype=np.float64)
    b, n, k = design.shape
    p = k - 1
    df_resid = n - k
    if p < 1 or df_resid < 1:
        raise ValueError(f"need at least one regressor and n > k; got n={n}, k={k}")
    means = design[:, :, 1:].mean(axis=1)
    centred = design[:, :, 1:] - means[:, None, :]
    cross = np.matmul(centred.transpose(0, 2, 1), centred)
    scale = np.sqrt(np.diagonal(cross, axis1=1, axis2=2))
    constant = ~(scale > 1e-13 * np.sqrt(n) * np.abs(means)) | (scale == 0.0)
    bad = constant.any(axis=1) | ~np.isfinite(scale).all(axis=1)
    if bad.any():
        # Keep the stack solvable; flagged products are refitted without the bad terms.
        centred[bad] = _placeholder_columns(n, p)
        cross[bad] = np.eye(p)
        scale[bad] = 1.0
    y_mean = response.mean(axis=1)
    yc = response - y_mean[:, None]

    if method == "normal":
        gram = cross / scale[:, :, None] / scale[:, None, :]
        gram_inv, singular = _safe_inverse(gram)
        cross_inv = gram_inv / scale[:, :, None] / scale[:, None, :]
        slopes = _mv(cross_inv, _tv(centred, yc))
        resid = yc - _mv(centred, slopes)
        slopes = slopes + _mv(cross_inv, _tv(centred, resid))
    elif method == "qr":
        q, r = np.linalg.qr(centred / scale[:, None, :])
        singular = np.abs(np.diagonal(r, axis1=1, axis2=2)).min(axis=1) <= 1e-14
        r = np.where(singular[:, None, None], np.eye(p), r)
        r_inv = np.linalg.inv(r)
        gram_inv = np.matmul(r_inv, r_inv.transpose(0, 2, 1))
        cross_inv = gram_inv / scale[:, :, None] / scale[:, None, :]
        slopes = _mv(r_inv, _tv(q, yc)) / scale
    else:
        raise ValueError(f"unknown method {method!r}")
    resid = yc - _mv(centred, slopes)
    vif_max = np.diagonal(gram_inv, axis1=1, axis2=2).max(axis=1)
    bad = bad | singular | ~np.isfinite(vif_max) | (vif_max > RANK_VIF_LIMIT)

    ssr = np.einsum("bn,bn->b", resid, resid)
    tss = np.einsum("bn,bn->b", yc, yc)
    sigma2 = ssr / df_resid

    # Covariance of theta = (intercept of the centred model, slopes).
    if cov_type == "classical":
        cov_slopes = sigma2[:, None, None] * cross_inv
        cov = np.empty((b, k, k))
        cov[:, 1:, 1:] = cov_slopes
        cross_term = -_mv(cov_slopes, means)
        cov[:, 0, 1:] = cross_term
        cov[:, 1:, 0] = cross_term
        cov[:, 0, 0] = sigma2 / n + np.einsum("bj,bj->b", means, _mv(cov_slopes, means))
    else:
        cov, cov_slopes = _robust_cov(centred, cross_inv, means, resid, cov_type, hac_lags)
    params = np.empty((b, k))
    params[:, 1:] = slopes
    params[:, 0] = y_mean - np.einsum("bj,bj->b", means, slopes)
    with np.errstate(divide="ignore", invalid="ignore"):
        bse = np.sqrt(np.diagonal(cov, axis1=1, axis2=2))
        tvalues = params / bse
        r_squared = 1.0 - ssr / tss
        if cov_type == "classical":
            f_stat = (r_squared / p) / ((1.0 - r_squared) / df_resid)
        else:
            # Wald test of all slopes, solved on the unit-diagonal scale for accuracy.
            scaled_slopes = slopes * scale
            scaled_cov = cov_slopes * scale[:, :, None] * scale[:, None, :]
            f_stat = np.einsum("bj,bj->b", scaled_slopes, _solve(scaled_cov, scaled_slopes)) / p
    return OLSStack(
        params=params,
        cov=cov,
        bse=bse,
        tvalues=tvalues,
        pvalues=t_two_sided_p(tvalues, df_resid),
        resid=resid,
        n_obs=n,
        df_resid=df_resid,
        ssr=ssr,
        r_squared=r_squared,
        adj_r_squared=1.0 - (1.0 - r_squared) * (n - 1) / df_resid,
        f_stat=f_stat,
        f_p_value=special.fdtrc(p, df_resid, f_stat),
        sigma=np.sqrt(sigma2),
        rank_deficient=np.flatnonzero(bad),
        _centred=centred,
        _means=means,
        _cross_inv=cross_inv,
    )


@np.errstate(divide="ignore", invalid="ignore", over="ignore")
def _robust_cov(
    centred: FloatArray,
    cross_inv: FloatArray,
    means: FloatArray,
    resid: FloatArray,
    cov_type: str,
    hac_lags: int | None,
) -> tuple[FloatArray, FloatArray]:
    """Sandwich covariance of the original coefficients and of the slopes.

    Periods with leverage 1 make the HC3 figures NaN (flagged downstream), never an error.
    """
    b, n, p = centred.shape
    k = p + 1
    w = np.concatenate([np.ones((b, n, 1)), centred], axis=2)
    bread = np.zeros((b, k, k))
    bread[:, 0, 0] = 1.0 / n
    bread[:, 1:, 1:] = cross_inv
    leverage = 1.0 / n + np.einsum("bnj,bnj->bn", np.matmul(centred, cross_inv), centred)
    meat = sandwich_meat(w, resid, cov_type=cov_type, leverage=leverage, hac_lags=hac_lags)
    cov_theta = np.matmul(np.matmul(bread, meat), bread)
    # Back to the original coefficients: b0 = a - means . slopes.
    transform = np.zeros((b, k, k))
    transform[:, 0, 0] = 1.0
    transform[:, 0, 1:] = -means
    transform[:, 1:, 1:] = np.eye(p)
    cov = np.matmul(np.matmul(transform, cov_theta), transform.transpose(0, 2, 1))
    return 0.5 * (cov + cov.transpose(0, 2, 1)), cov_theta[:, 1:, 1:]


def _solve(matrices: FloatArray, vectors: FloatArray) -> FloatArray:
    try:
        return np.asarray(np.linalg.solve(matrices, vectors[:, :, None])[:, :, 0], np.float64)
    except np.linalg.LinAlgError:
        return np.full(vectors.shape, np.nan)


def _placeholder_columns(n: int, p: int) -> FloatArray:
    """Orthogonal centred columns standing in for a degenerate design."""
    grid = np.arange(n, dtype=np.float64)
    cols: FloatArray = np.stack(
        [np.cos(np.pi * (j + 1) * (grid + 0.5) / n) for j in range(p)], axis=1
    )
    return cols


@np.errstate(divide="ignore", invalid="ignore")
def durbin_watson(resid: FloatArray) -> FloatArray:
    """Durbin-Watson statistic of each row of residuals (NaN when they are all zero)."""
    step = np.diff(resid, axis=1)
    result: FloatArray = np.einsum("bn,bn->b", step, step) / np.einsum("bn,bn->b", resid, resid)
    return result


@np.errstate(divide="ignore", invalid="ignore")
def jarque_bera_p(resid: FloatArray) -> FloatArray:
    """Jarque-Bera normality p-value per row, with the biased moments statsmodels uses."""
    n = resid.shape[1]
    dev = resid - resid.mean(axis=1, keepdims=True)
    sq = dev * dev
    m2 = sq.mean(axis=1)
    skew = np.einsum("bn,bn->b", sq, dev) / n / m2**1.5
    kurt = np.einsum("bn,bn->b", sq, sq) / n / m2**2
    jb = n / 6.0 * (skew**2 + (kurt - 3.0) ** 2 / 4.0)
    result: FloatArray = special.chdtrc(2, jb)
    return result
