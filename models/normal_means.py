"""Empirical-Bayes estimation of many normal means, with an optional family level.

The model, for estimates ``y_i`` with known standard errors ``s_i``::

    y_i ~ N(theta_i, s_i**2)                  (each product's own estimate)
    theta_i ~ N(mu_f, tau**2)                 (products of family f spread around its mean)
    mu_f ~ N(mu, omega**2)                    (family means spread around the catalogue mean)

Without families (or with one) the family level is left out (``omega = 0``) and this is
the normal-normal model of Efron & Morris (1975) and of Gelman et al., *Bayesian Data
Analysis*, 3rd ed., section 5.5. The spreads ``tau**2`` and ``omega**2`` are estimated by
restricted maximum likelihood (REML: Patterson & Thompson 1971; Harville 1977), the
catalogue mean ``mu`` by generalised least squares given them; the estimates are then
shrunk by the exact normal posterior given the spreads, with a flat prior on ``mu``, so
that their variances include the uncertainty of the estimated means.

Each family's covariance is diagonal plus a constant, so every figure is a sum over
products (no matrix is formed); a catalogue of any size costs a few passes.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Final

import numpy as np
from scipy import optimize

from models._typing import FloatArray

MIN_ESTIMATES: Final = 3
"""Fewest estimates from which spreads are estimated (two cannot tell spread from noise)."""
_GRID: Final = 9


@dataclass(frozen=True)
class NormalMeans:
    """Shrunk estimates of many normal means and the hyper-parameters behind them.

    Attributes
    ----------
    mean : float
        The catalogue mean ``mu`` (generalised least squares given the spreads).
    mean_std_error : float
        Its standard error.
    spread : float
        ``tau``: standard deviation of the true values within a family (or overall).
    family_spread : float
        ``omega``: standard deviation of the family means around ``mu`` (0 without families).
    family_means : dict of str to float
        Posterior mean of each family's mean (``mu`` itself without families).
    shrunk, shrunk_std_error : tuple of float
        Posterior mean and standard deviation of each ``theta_i``, in input order.
    weight_on_family : tuple of float
        ``s_i**2 / (s_i**2 + tau**2)``: the weight of the family's mean in the shrunk value.
    restricted_log_likelihood : float
        The maximised restricted log-likelihood (constants left out).
    """

    mean: float
    mean_std_error: float
    spread: float
    family_spread: float
    family_means: dict[str, float]
    shrunk: tuple[float, ...]
    shrunk_std_error: tuple[float, ...]
    weight_on_family: tuple[float, ...]
    restricted_log_likelihood: float


@dataclass(frozen=True)
class _Sums:
    """Per-family sums of the marginal model for given spreads."""

    weight: FloatArray  # sum_i 1 / (s_i^2 + tau^2), per family
    weighted: FloatArray  # sum_i y_i / (s_i^2 + tau^2)
    squares: FloatArray  # sum_i y_i^2 / (s_i^2 + tau^2)
    log_det: float  # log det of the marginal covariance, all families


def _sums(
    y: FloatArray, s2: FloatArray, codes: FloatArray, n_fam: int, tau2: float, omega2: float
) -> _Sums:
    w = 1.0 / (s2 + tau2)
    idx = codes.astype(np.int64)
    weight = np.bincount(idx, w, n_fam).astype(np.float64)
    weighted = np.bincount(idx, w * y, n_fam).astype(np.float64)
    squares = np.bincount(idx, w * y * y, n_fam).astype(np.float64)
    log_det = float(-np.sum(np.log(w)) + np.sum(np.log1p(omega2 * weight)))
    return _Sums(weight, weighted, squares, log_det)


def _restricted(
    y: FloatArray, s2: FloatArray, codes: FloatArray, n_fam: int, tau2: float, omega2: float
) -> tuple[float, float, float]:
    """Restricted log-likelihood, the GLS mean and its variance for given spreads.

    With ``V_f = D_f + omega2 * 11'`` and ``D_f = diag(s_i^2 + tau2)``:
    ``1'V_f^-1 1 = W_f / (1 + omega2 W_f)``, ``1'V_f^-1 y = A_f / (1 + omega2 W_f)`` and
    ``y'V_f^-1 y = Q_f - omega2 A_f^2 / (1 + omega2 W_f)`` (Sherman-Morrison).
    """
    sums = _sums(y, s2, codes, n_fam, tau2, omega2)
    scale = 1.0 + omega2 * sums.weight
    one_v_one = float(np.sum(sums.weight / scale))
    one_v_y = float(np.sum(sums.weighted / scale))
    y_v_y = float(np.sum(sums.squares - omega2 * sums.weighted**2 / scale))
    mu = one_v_y / one_v_one
    quad = y_v_y - 2.0 * mu * one_v_y + mu * mu * one_v_one
    loglik = -0.5 * (sums.log_det + np.log(one_v_one) + quad)
    return float(loglik), mu, 1.0 / one_v_one


def normal_means(
    values: Sequence[float],
    std_errors: Sequence[float],
    families: Sequence[str] | None = None,
) -> NormalMeans:
    """Shrink ``values`` (with known ``std_errors``) toward their family and overall means.

    Parameters
    ----------
    values, std_errors : sequence of float
        Finite estimates and their positive standard errors.
    families : sequence of str, optional
        Each estimate's family. With fewer than two families the family level is left
        out and every estimate shrinks toward the one overall mean.

    Raises
    ------
    ValueError
        Fewer than ``MIN_ESTIMATES`` estimates, lengths differ, a value is not finite,
        or a standard error is not positive.

    Examples
    --------
    Equal standard errors: the spread is the excess of the sample variance over the
    noise (closed form of REML for that case), here ``(250 - 100)`` and so ``tau**2 = 150``.

    >>> result = normal_means([-10.0, 0.0, 10.0, 20.0, 30.0], [10.0] * 5)
    >>> round(result.spread**2, 3), round(result.weight_on_family[0], 4)
    (150.0, 0.4)
    """
    y = np.asarray(values, dtype=np.float64)
    s = np.asarray(std_errors, dtype=np.float64)
    if y.ndim != 1 or y.shape != s.shape:
        raise ValueError("values and std_errors must be sequences of the same length")
    if families is not None and len(families) != y.size:
        raise ValueError("families must name one family per value")
    if y.size < MIN_ESTIMATES:
        raise ValueError(f"at least {MIN_ESTIMATES} estimates are needed; got {y.size}")
    if not (np.all(np.isfinite(y)) and np.all(np.isfinite(s)) and np.all(s > 0.0)):
        raise ValueError("values must be finite and standard errors finite and positive")
    with np.errstate(over="ignore", under="ignore", divide="ignore"):
        squares_ok = np.all(np.isfinite(y * y)) and np.all(np.isfinite(1.0 / (s * s)))
    if not squares_ok:
        raise ValueError("values and standard errors must be small and large enough to square")
    names = [str(f) for f in sorted(set(families))] if families is not None else ["(all)"]
    two_level = len(names) >= 2
    if two_level:
        assert families is not None
        lookup = {name: k for k, name in enumerate(names)}
        codes = np.array([lookup[str(f)] for f in families], dtype=np.float64)
    else:
        codes = np.zeros(y.size)
    n_fam = len(names)
    s2 = s * s
    tau2, omega2 = _maximise(y, s2, codes, n_fam, two_level)
    loglik, mu, mu_var = _restricted(y, s2, codes, n_fam, tau2, omega2)

    sums = _sums(y, s2, codes, n_fam, tau2, omega2)
    scale = 1.0 + omega2 * sums.weight
    # Family means given mu: (mu + omega2 A_f) / (1 + omega2 W_f), with variance
    # omega2 / (1 + omega2 W_f); mu's own uncertainty enters through 1 / (1 + omega2 W_f).
    fam_mean = (mu + omega2 * sums.weighted) / scale
    fam_var = omega2 / scale + mu_var / scale**2
    idx = codes.astype(np.int64)
    weight = s2 / (s2 + tau2)
    shrunk = weight * fam_mean[idx] + (1.0 - weight) * y
    shrunk_var = (1.0 - weight) * s2 + weight**2 * fam_var[idx]
    return NormalMeans(
        mean=mu,
        mean_std_error=float(np.sqrt(mu_var)),
        spread=float(np.sqrt(tau2)),
        family_spread=float(np.sqrt(omega2)),
        family_means={name: float(fam_mean[k]) for k, name in enumerate(names)},
        shrunk=tuple(float(v) for v in shrunk),
        shrunk_std_error=tuple(float(v) for v in np.sqrt(shrunk_var)),
        weight_on_family=tuple(float(v) for v in weight),
        restricted_log_likelihood=loglik,
    )


def _maximise(
    y: FloatArray, s2: FloatArray, codes: FloatArray, n_fam: int, two_level: bool
) -> tuple[float, float]:
    """REML spreads ``(tau2, omega2)``: a grid over plausible values, then a bounded polish.

    The restricted likelihood can peak on the boundary (a spread of 0, as in the eight
    schools), so the grid includes 0 and the polish keeps the bounds; the best of the
    grid point, the polished point and the boundary points is returned.
    """
    upper = float(np.var(y, ddof=1) + np.max(s2)) * 4.0 + 1e-12

    def negative(point: Sequence[float]) -> float:
        # Spreads as shares of ``upper``, so that both coordinates are of order one.
        tau2 = max(float(point[0]), 0.0) * upper
        omega2 = max(float(point[1]), 0.0) * upper if two_level else 0.0
        return -_restricted(y, s2, codes, n_fam, tau2, omega2)[0]

    steps = np.linspace(0.0, 1.0, _GRID) ** 2
    grid = [(t, o) for t in steps for o in (steps if two_level else [0.0])]
    best = min(grid, key=negative)
    bounds = [(0.0, 1.0), (0.0, 1.0 if two_level else 0.0)]
    polished = optimize.minimize(
        negative,
        np.array(best),
        method="L-BFGS-B",
        bounds=bounds,
        options={"ftol": 1e-15, "gtol": 1e-11, "maxiter": 500},
    )
    candidates = [best, tuple(float(v) for v in polished.x)]
    point = min(candidates, key=negative)
    candidates += [(0.0, point[1]), (point[0], 0.0), (0.0, 0.0)]
    tau2, omega2 = min(candidates, key=negative)
    return max(float(tau2), 0.0) * upper, (max(float(omega2), 0.0) * upper if two_level else 0.0)
