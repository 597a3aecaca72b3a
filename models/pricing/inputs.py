"""Checks shared by the single-product and family optimisers, and coefficient draws."""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Final

import numpy as np

from models._typing import FloatArray
from models.errors import PricingInputError, WrongSignError
from models.pricing.curve import own_index
from models.result import DemandFit

OBJECTIVES: Final = ("profit", "revenue")
INTERVAL_LEVEL: Final = 0.90
MAX_DRAWS: Final = 10_000
CURVE_POINTS: Final = (50, 200)


def check_objective(objective: str) -> None:
    if objective not in OBJECTIVES:
        raise PricingInputError(f"objective must be 'profit' or 'revenue'; got {objective!r}")


def check_value(name: str, value: float | None, *, positive: bool) -> float | None:
    """A finite number (positive, or non-negative) or None."""
    if value is None:
        return None
    number = float(value)
    if not math.isfinite(number) or number < 0.0 or (positive and number == 0.0):
        kind = "positive" if positive else "non-negative"
        raise PricingInputError(f"{name} must be a finite {kind} number; got {value!r}")
    return number


def check_draws(uncertainty_draws: int) -> None:
    if isinstance(uncertainty_draws, bool) or not 0 <= int(uncertainty_draws) <= MAX_DRAWS:
        raise PricingInputError(f"uncertainty_draws must be between 0 and {MAX_DRAWS}")


def check_curve_points(curve_points: int) -> None:
    low, high = CURVE_POINTS
    if curve_points != 0 and not low <= curve_points <= high:
        raise PricingInputError(f"curve_points must be 0 (no curve) or between {low} and {high}")


def wrong_sign_reason(fit: DemandFit) -> str:
    """Why a fit whose own-price effect is not negative cannot be optimised, in words."""
    row = fit.own_price
    text = f"{fit.sku}: the own-price coefficient of the {fit.form} fit is {row.estimate:+.3g}"
    if math.isfinite(row.ci_low) and math.isfinite(row.ci_high):
        text += f" (95% interval {row.ci_low:.3g} to {row.ci_high:.3g})"
    text += (
        ": the wrong sign, as expected demand does not fall when the price rises, so neither "
        "profit nor revenue has an optimum and any optimiser would only follow the price to "
        "a bound. This usually signals price endogeneity, a missing demand driver or too "
        "little price variation; refit (instruments, more covariates, family pooling) or "
        "pass allow_wrong_sign=true to optimise anyway"
    )
    codes = [w.code for w in fit.warnings]
    if codes:
        text += f". Fit warnings: {', '.join(codes)}"
    if fit.pooled is not None and fit.pooled.pooled < 0.0:
        text += f". The family-pooled elasticity is {fit.pooled.pooled:.3g}"
    return text + "."


def check_signs(fits: Sequence[DemandFit], *, allow_wrong_sign: bool) -> list[str]:
    """Skus whose own-price coefficient has the wrong sign (is not negative); raises
    unless ``allow_wrong_sign``."""
    wrong = [f for f in fits if not f.params[own_index(f)] < 0.0]
    if wrong and not allow_wrong_sign:
        raise WrongSignError(
            {f.sku: float(f.params[own_index(f)]) for f in wrong},
            " ".join(wrong_sign_reason(f) for f in wrong),
        )
    return [f.sku for f in wrong]


def coefficient_draws(fit: DemandFit, n: int, rng: np.random.Generator) -> FloatArray | None:
    """``n`` coefficient vectors from N(params, cov); None when the covariance is unusable.

    The symmetric square root of the covariance (negative eigenvalues from rounding set
    to zero) keeps near-singular covariances, such as an exact fit's, usable.
    """
    cov = fit.cov
    if not np.all(np.isfinite(cov)) or not np.all(np.isfinite(fit.params)):
        return None
    values, vectors = np.linalg.eigh(0.5 * (cov + cov.T))
    root = vectors * np.sqrt(np.clip(values, 0.0, None))
    normal = rng.standard_normal((n, cov.shape[0]))
    draws: FloatArray = fit.params + normal @ root.T
    return draws


def interval(values: FloatArray, level: float = INTERVAL_LEVEL) -> tuple[float, float] | None:
    """Central ``level`` interval of finite values (None when there are none)."""
    finite = values[np.isfinite(values)]
    if finite.size == 0:
        return None
    tail = (1.0 - level) / 2.0
    low, high = np.quantile(finite, [tail, 1.0 - tail])
    return float(low), float(high)
