"""Expected units from a fitted form, retransformed to the units scale."""

from __future__ import annotations

import numpy as np

from models._typing import FloatArray
from models.spec import LOG_RESPONSE_FORMS


def smearing_factor(resid: FloatArray) -> float:
    """Duan's (1983) smearing estimate ``mean(exp(e))`` for retransforming log predictions."""
    return float(np.mean(np.exp(resid)))


def expected_units(
    form: str, design: FloatArray, params: FloatArray, smearing: float | None
) -> FloatArray:
    """Mean units at design rows.

    Linear as is, log forms ``exp(xb) * smearing``, poisson ``exp(xb)``.
    """
    linear = design @ params
    if form == "linear":
        return linear
    if form in LOG_RESPONSE_FORMS:
        return np.exp(linear) * (1.0 if smearing is None else smearing)
    result: FloatArray = np.exp(linear)
    return result


def wape(actual: FloatArray, predicted: FloatArray) -> float:
    """Weighted absolute percentage error ``sum|a - p| / sum|a|`` (NaN if no units)."""
    total = float(np.sum(np.abs(actual)))
    return float(np.sum(np.abs(actual - predicted)) / total) if total > 0 else float("nan")
