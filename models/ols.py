"""Least squares for a stack of products that share a design layout.

Every product in a stack has the same number of observations ``n`` and of columns ``k``
(column 0 is the intercept). The regressors are centred, and the centred cross-product is
scaled to unit diagonal before solving, which makes it a correlation matrix: Longley's
design condition number drops from 5e9 to about 1e2 (1.2e4 for the cross-product), so
normal equations followed by one step of iterative refinement are accurate enough for fits
that only predict (hold-out scores). ``method="qr"`` (every reported fit) solves the same
system by Householder QR and, where rounding can cost digits, refines the solution against
the original design with double-double residuals (:mod:`models.refine`), which reaches the
NIST StRD certified digits. Neither decides a rank: members a solver cannot settle are
flagged for the single-product path, which decides by pivoted QR (:mod:`models.rank`).

Classical standard errors are computed in the centred coordinates, where the cross-product
matrix is block diagonal, and mapped back to the original coefficients with the exact
linear transformation; robust ones are the cross-products of each period's influence on
the original coefficients. Residual and design diagnostics are computed for the whole stack
on first access. Internally the centred regressors are held one row per column,
(b, k - 1, n), so that element-wise work runs along whole periods.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property
from typing import Final

import numpy as np
from scipy import special

from models._typing import BoolArray, FloatArray, IntArray
from models.refine import refine
from models.sandwich import newey_west_lags, robust_root

RANK_TOLERANCE: Final = 1e-13
"""Relative size of a QR diagonal below which the stacked solver hands a product to the
single-product path, where a pivoted QR decides its rank (a routing flag, never a rank
decision by itself)."""
_EPS: Final = float(np.finfo(np.float64).eps)
NORMAL_GRAM_LIMIT: Final = 1e8
"""Largest diagonal of the inverse unit-diagonal cross-product the normal equations are
trusted with; beyond it the product takes the QR path."""
REFINE_CONDITION, REFINE_OFFSET = 1e3, 1e3  # when to refine a QR solution: see _solve


def t_two_sided_p(tvalues: FloatArray, df: int) -> FloatArray:
    """Two-sided p-values of Student's t (``scipy.special.stdtr``, no distribution overhead)."""
    result: FloatArray = 2.0 * special.stdtr(df, -np.abs(tvalues))
    return result


@dataclass(frozen=True)
class OLSStack:
    """Estimates and statistics for a stack of ``b`` products (arrays lead with ``b``).

    ``vif``, ``condition_number``, ``durbin_watson``, ``breusch_pagan_p``,
    ``jarque_bera_p``, ``aic``, ``bic`` and ``llf`` are computed on first access.
    ``rank_deficient`` lists products this solver could not settle (a constant column or
    a design too close to singular for it); their figures are not valid and they go to the
    single-product path, whose pivoted QR decides which terms, if any, to drop.
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
    _cross: FloatArray
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
        cross_diag = np.diagonal(self._cross, axis1=1, axis2=2)
        inv_diag = np.diagonal(self._cross_inv, axis1=1, axis2=2)
        b = self.params.shape[0]
        return np.concatenate([np.full((b, 1), np.nan), cross_diag * inv_diag], axis=1)

    @cached_property
    def condition_number(self) -> FloatArray:
        """Condition number of the design scaled to unit column length (Belsley, Kuh & Welsch 1980).

        The ratio of the extreme singular values of the design (intercept included,
        uncentred) with every column scaled to unit length; computed from the design
        itself, not its cross-product, so that it stays meaningful up to about 1e15.
        """
        means, centred = self._means, self._centred
        b, p = means.shape
        n = centred.shape[2]
        design = np.ones((b, n, p + 1))
        design[:, :, 1:] = (centred + means[:, :, None]).transpose(0, 2, 1)
        design /= np.linalg.norm(design, axis=1, keepdims=True)
        with np.errstate(divide="ignore", invalid="ignore"):
            # The singular values of the design are those of its R factor (k x k).
            r_factor = np.linalg.qr(np.nan_to_num(design), mode="r")
            singular = np.linalg.svd(r_factor, compute_uv=False)
            result: FloatArray = singular[:, 0] / singular[:, -1]
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
        p, n = self._centred.shape[1], self._centred.shape[2]
        e = self.resid**2
        ec = e - e.mean(axis=1, keepdims=True)
        g = _mv(self._centred, ec)
        explained = np.einsum("bj,bj->b", g, _mv(self._cross_inv, g))
        with np.errstate(divide="ignore", invalid="ignore"):
            lm = n * explained / np.einsum("bn,bn->b", ec, ec)
        result: FloatArray = special.chdtrc(p, lm)
        return result


def _mv(a: FloatArray, v: FloatArray) -> FloatArray:
    """Batched matrix-vector product ``a @ v`` for ``a`` (b, i, j) and ``v`` (b, j)."""
    result: FloatArray = np.matmul(a, v[:, :, None])[:, :, 0]
    return result


def _vm(v: FloatArray, a: FloatArray) -> FloatArray:
    """Batched vector-matrix product ``v @ a`` for ``v`` (b, i) and ``a`` (b, i, j)."""
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


@dataclass(frozen=True)
class _Solution:
    """The least-squares solution of a stack (shared by every caller).

    ``centred`` holds one row per regressor, (b, p, n), so that element-wise work runs
    along whole periods. ``flagged`` marks members whose figures are not to be trusted
    here: a constant or non-finite column, or a design too close to singular for this
    solver; the single-product path decides their rank by pivoted QR.
    """

    means: FloatArray
    centred: FloatArray
    scale: FloatArray
    yc: FloatArray
    params: FloatArray
    resid: FloatArray
    cross: FloatArray
    cross_inv: FloatArray
    flagged: BoolArray

    @property
    def slopes(self) -> FloatArray:
        return self.params[:, 1:]


def _solve(design: FloatArray, response: FloatArray, method: str) -> _Solution:
    """Centre, scale to unit diagonal and solve; flag members this solver cannot settle.

    ``method="qr"`` factors the centred, unit-length regressors by Householder QR, builds
    the thin QR factors of the original design from them (the intercept's column is
    orthogonal to centred ones) and refines the solution against the original design
    with double-double residuals (:mod:`models.refine`).
    """
    b, n, k = design.shape
    p = k - 1
    if p < 1 or n - k < 1:
        raise ValueError(f"need at least one regressor and n > k; got n={n}, k={k}")
    # One row per column: free when the caller built the design that way.
    columns = np.ascontiguousarray(design.transpose(0, 2, 1))
    means = columns[:, 1:, :].mean(axis=2)
    centred = columns[:, 1:, :] - means[:, :, None]
    cross = np.matmul(centred, centred.transpose(0, 2, 1))
    scale = np.sqrt(np.diagonal(cross, axis1=1, axis2=2))
    constant = ~(scale > 1e-13 * np.sqrt(n) * np.abs(means)) | (scale == 0.0)
    bad = constant.any(axis=1) | ~np.isfinite(scale).all(axis=1)
    bad |= ~np.isfinite(response).all(axis=1)
    if bad.any():
        # Keep the stack solvable; flagged products are refitted without the bad terms.
        centred[bad] = _placeholder_columns(n, p).T
        cross[bad] = np.eye(p)
        scale[bad] = 1.0
        response = np.where(np.isfinite(response), response, 0.0)
        columns = np.where(np.isfinite(columns), columns, 0.0)
    y_mean = response.mean(axis=1)
    yc = response - y_mean[:, None]
    # A response that never varies (up to rounding in its mean) is fitted exactly: every
    # slope is 0 and the residuals vanish, rather than rounding noise read as an effect.
    flat = np.abs(yc).max(axis=1) <= 4.0 * _EPS * np.abs(y_mean)
    if flat.any():
        response = np.where(flat[:, None], response[:, :1], response)
        y_mean = np.where(flat, response[:, 0], y_mean)
        yc[flat] = 0.0

    if method == "normal":
        gram = cross / scale[:, :, None] / scale[:, None, :]
        gram_inv, singular = _safe_inverse(gram)
        cross_inv = gram_inv / scale[:, :, None] / scale[:, None, :]
        slopes = _mv(cross_inv, _mv(centred, yc))
        resid = yc - _vm(slopes, centred)
        slopes = slopes + _mv(cross_inv, _mv(centred, resid))
        with np.errstate(invalid="ignore"):
            unsettled = ~(np.diagonal(gram_inv, axis1=1, axis2=2).max(axis=1) <= NORMAL_GRAM_LIMIT)
        params = np.empty((b, k))
        params[:, 1:] = slopes
        params[:, 0] = y_mean - np.einsum("bj,bj->b", means, slopes)
        resid = yc - _vm(slopes, centred)
    elif method == "qr":
        unit = (centred / scale[:, :, None]).transpose(0, 2, 1)
        q_c, r_unit = np.linalg.qr(unit)
        diagonal = np.abs(np.diagonal(r_unit, axis1=1, axis2=2))
        unsettled = ~(diagonal.min(axis=1) > RANK_TOLERANCE * diagonal.max(axis=1))
        # Only an exactly singular factor is replaced (to keep the stack solvable); a merely
        # flagged one is solved as it is, since the single-product path, having decided the
        # rank by pivoted QR, reads these figures whatever the flag says.
        singular = ~(diagonal.min(axis=1) > 0.0) | ~np.isfinite(diagonal).all(axis=1)
        r_unit = np.where(singular[:, None, None], np.eye(p), r_unit)
        r_inv = _upper_inverse(r_unit)
        gram_inv = np.matmul(r_inv, r_inv.transpose(0, 2, 1))
        cross_inv = gram_inv / scale[:, :, None] / scale[:, None, :]
        slopes = _mv(r_inv, np.einsum("bnj,bn->bj", q_c, yc)) / scale
        params = np.empty((b, k))
        params[:, 1:] = slopes
        params[:, 0] = y_mean - np.einsum("bj,bj->b", means, slopes)
        resid = yc - _vm(slopes, centred)
        # Refined where rounding can cost digits: an ill-conditioned factor, or a mean over
        # REFINE_OFFSET sd (the intercept cancels); else the QR is good to ~cond * eps.
        offset = (np.abs(means) > REFINE_OFFSET * scale / np.sqrt(n)).any(axis=1)
        conditioned = np.linalg.norm(r_unit, axis=(1, 2)) * np.linalg.norm(r_inv, axis=(1, 2))
        needs = ~(conditioned < REFINE_CONDITION) | offset
        needs &= ~flat
        if needs.any():
            at = np.flatnonzero(needs)
            root_n = np.sqrt(n)  # X = [1|M] = QR, Q = [1/√n | q_c], R = [[√n, √n m'], [0, R_c]]
            q = np.concatenate([np.full((at.size, n, 1), 1.0 / root_n), q_c[at]], axis=2)
            r = np.zeros((at.size, k, k))
            r[:, 0, 0] = root_n
            r[:, 0, 1:] = root_n * means[at]
            r[:, 1:, 1:] = r_unit[at] * scale[at][:, None, :]
            params[at], resid[at] = refine(columns[at], response[at], params[at], q, r)
    else:
        raise ValueError(f"unknown method {method!r}")
    flagged = bad | unsettled | ~np.isfinite(params).all(axis=1)
    return _Solution(means, centred, scale, yc, params, resid, cross, cross_inv, flagged)


def _upper_inverse(r: FloatArray) -> FloatArray:
    """Inverses of a stack of upper-triangular matrices by back substitution, row by row."""
    p = r.shape[1]
    inverse = np.zeros_like(r)
    diagonal = np.diagonal(r, axis1=1, axis2=2)
    for i in range(p - 1, -1, -1):
        row = -np.matmul(r[:, i : i + 1, i + 1 :], inverse[:, i + 1 :, :])[:, 0, :]
        row[:, i] = 1.0
        inverse[:, i, :] = row / diagonal[:, i : i + 1]
    return inverse


def fit_ols_params(
    design: FloatArray, response: FloatArray, *, method: str = "normal"
) -> tuple[FloatArray, FloatArray, IntArray]:
    """Coefficients, residuals and rank-deficient members of a stack, without any statistics.

    The figures are those of :func:`fit_ols_stack` with the same ``method`` (the
    solution is shared), for callers that only predict, such as hold-out scoring.
    """
    solution = _solve(
        np.asarray(design, dtype=np.float64), np.asarray(response, dtype=np.float64), method
    )
    return solution.params, solution.resid, np.flatnonzero(solution.flagged)


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
        ``"classical"``, ``"hc0"``, ``"hc1"``, ``"hc2"``, ``"hc3"`` or ``"hac"``
        (:mod:`models.sandwich`).
    hac_lags : int, optional
        Newey-West truncation lag; default :func:`newey_west_lags`.
    method : str
        ``"normal"`` (centred and scaled normal equations plus one refinement step)
        or ``"qr"`` (Householder QR of the centred, scaled regressors).

    Returns
    -------
    OLSStack
        Figures for each product; ``rank_deficient`` lists products whose figures need
        the single-product path (see :class:`OLSStack`).

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
    solution = _solve(design, response, method)
    means, scale, slopes, resid = solution.means, solution.scale, solution.slopes, solution.resid
    cross_inv = solution.cross_inv

    ssr = np.einsum("bn,bn->b", resid, resid)
    tss = np.einsum("bn,bn->b", solution.yc, solution.yc)
    sigma2 = ssr / df_resid

    if cov_type == "classical":
        cov_slopes = sigma2[:, None, None] * cross_inv
        cov = np.empty((b, k, k))
        cov[:, 1:, 1:] = cov_slopes
        cross_term = -_mv(cov_slopes, means)
        cov[:, 0, 1:] = cross_term
        cov[:, 1:, 0] = cross_term
        cov[:, 0, 0] = sigma2 / n + np.einsum("bj,bj->b", means, _mv(cov_slopes, means))
    else:
        cov = _robust_cov(solution, cov_type, hac_lags)
        cov_slopes = cov[:, 1:, 1:]
    params = solution.params
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
            wald = np.einsum("bj,bj->b", scaled_slopes, _solve_each(scaled_cov, scaled_slopes))
            f_stat = wald / p
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
        rank_deficient=np.flatnonzero(solution.flagged),
        _centred=solution.centred,
        _means=means,
        _cross=solution.cross,
        _cross_inv=cross_inv,
    )


@np.errstate(divide="ignore", invalid="ignore", over="ignore")
def _robust_cov(solution: _Solution, cov_type: str, hac_lags: int | None) -> FloatArray:
    """Sandwich covariance of the original coefficients from each period's influence.

    Period t moves the slopes by ``inv(C'C) c_t psi_t`` and the centred intercept by
    ``psi_t / n`` (``psi`` the residual, scaled as :func:`models.sandwich.robust_root`
    says for HC0-HC3); the original
    intercept is ``a - means . slopes``. The covariance is the (Bartlett-weighted for
    HAC) cross-product of these influences, the same sandwich as :func:`sandwich_meat`
    between the bread, in square-root form.
    Periods with leverage 1 make the HC2 and HC3 figures NaN (flagged downstream), never an
    error.
    """
    centred, resid = solution.centred, solution.resid
    b, p, n = centred.shape
    k = p + 1
    pull = np.matmul(solution.cross_inv, centred)
    if cov_type == "hac":
        psi = resid
    else:
        leverage = 1.0 / n + np.einsum("bjn,bjn->bn", pull, centred)
        psi = robust_root(resid, cov_type, k, leverage)
    influence = np.empty((b, k, n))
    np.multiply(pull, psi[:, None, :], out=influence[:, 1:, :])
    influence[:, 0, :] = psi / n - _vm(solution.means, influence[:, 1:, :])
    cov = np.matmul(influence, influence.transpose(0, 2, 1))
    if cov_type == "hac":
        lags = newey_west_lags(n) if hac_lags is None else hac_lags
        for lag in range(1, min(lags, n - 1) + 1):
            weight = 1.0 - lag / (lags + 1.0)
            cross = np.matmul(influence[:, :, lag:], influence[:, :, :-lag].transpose(0, 2, 1))
            cov += weight * (cross + cross.transpose(0, 2, 1))
        cov *= n / (n - k)
    result: FloatArray = 0.5 * (cov + cov.transpose(0, 2, 1))
    return result


def _solve_each(matrices: FloatArray, vectors: FloatArray) -> FloatArray:
    """Solve each member's system; a singular member gets NaN, never its neighbours."""
    try:
        return np.asarray(np.linalg.solve(matrices, vectors[:, :, None])[:, :, 0], np.float64)
    except np.linalg.LinAlgError:
        out = np.full(vectors.shape, np.nan)
        for i in range(matrices.shape[0]):
            try:
                out[i] = np.linalg.solve(matrices[i], vectors[i])
            except np.linalg.LinAlgError:
                continue
        return out


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
