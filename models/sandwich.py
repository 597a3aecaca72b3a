"""The middle of sandwich covariances: heteroskedasticity-robust (HC0-HC3) and Newey-West.

With residuals ``e``, leverages ``h`` (the diagonal of the hat matrix), ``n`` periods and
``k`` coefficients, each period's squared residual is weighted (MacKinnon & White 1985,
"Some heteroskedasticity-consistent covariance matrix estimators with improved finite
sample properties", Journal of Econometrics 29, 305-325; White 1980 for HC0):

* ``hc0``: ``e^2``;
* ``hc1``: ``e^2 n / (n - k)`` (the "robust" default of most econometrics software);
* ``hc2``: ``e^2 / (1 - h)``;
* ``hc3``: ``e^2 / (1 - h)^2``;

``hac`` uses Bartlett weights up to the Newey-West lag (Newey & West 1987) with the
small-sample factor ``n / (n - k)``.
"""

from __future__ import annotations

from typing import Final

import numpy as np

from models._typing import FloatArray

ROBUST_KINDS: Final = ("hc0", "hc1", "hc2", "hc3")
LEVERAGE_KINDS: Final = ("hc2", "hc3")


def newey_west_lags(n_obs: int) -> int:
    """Newey-West lag truncation ``floor(4 (n / 100) ** (2 / 9))``.

    The plug-in rule of thumb of Newey & West (1994, Review of Economic Studies 61,
    631-653); it gives 4 lags for two years of weekly data.

    Examples
    --------
    >>> newey_west_lags(104)
    4
    """
    return int(np.floor(4.0 * (n_obs / 100.0) ** (2.0 / 9.0)))


def robust_root(
    resid: FloatArray, cov_type: str, n_coef: int, leverage: FloatArray | None = None
) -> FloatArray:
    """Each period's residual scaled so that its square is the ``cov_type`` weight.

    Periods with leverage 1 make the HC2 and HC3 figures NaN (flagged downstream), never
    an error.
    """
    n = resid.shape[-1]
    if cov_type == "hc0":
        return resid
    if cov_type == "hc1":
        result: FloatArray = resid * np.sqrt(n / (n - n_coef))
        return result
    if cov_type in LEVERAGE_KINDS:
        if leverage is None:
            raise ValueError(f"{cov_type} needs the leverages")
        with np.errstate(divide="ignore", invalid="ignore"):
            room = 1.0 - leverage
            scaled: FloatArray = resid / (np.sqrt(room) if cov_type == "hc2" else room)
        return scaled
    raise ValueError(f"unknown robust covariance {cov_type!r}")


def sandwich_meat(
    scores_design: FloatArray,
    resid: FloatArray,
    *,
    cov_type: str,
    leverage: FloatArray | None = None,
    hac_lags: int | None = None,
) -> FloatArray:
    """The middle of a sandwich covariance for a stack, ``sum_t w_t x_t x_t'``-style.

    ``scores_design`` is (b, n, k), ``resid`` and ``leverage`` (b, n); weights as in the
    module's description.
    """
    n, k = scores_design.shape[1], scores_design.shape[2]
    if cov_type in ROBUST_KINDS:
        root = robust_root(resid, cov_type, k, leverage)
        with np.errstate(invalid="ignore"):  # leverage 1: an infinite root times 0 is NaN
            scores = scores_design * root[:, :, None]
            robust: FloatArray = np.matmul(scores.transpose(0, 2, 1), scores)
        return robust
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
