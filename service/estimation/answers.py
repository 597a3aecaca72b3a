"""Answers from a product's active fit: elasticities at a point, and predictions.

The use cases behind ``GET .../elasticities`` and ``POST .../predict``: they check the
caller's variables against the fit, evaluate with the numerical library and add the
extrapolation warning when a price lies outside the range the fit has seen.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

from models import (
    DemandFit,
    ElasticityReport,
    Prediction,
    elasticities,
    predict,
    price_range_warning,
)
from service.core.errors import ErrorItem, InvalidInput, library_errors


@dataclass(frozen=True)
class ElasticityAnswer:
    """Elasticities from the fit, with the warnings that go beside them."""

    report: ElasticityReport
    warnings: list[dict[str, Any]]


@dataclass(frozen=True)
class PredictionAnswer:
    """A prediction from the fit, with the warnings that go beside it."""

    report: Prediction
    warnings: list[dict[str, Any]]


def parse_point(at: str) -> str | dict[str, float]:
    """``mean``, ``latest`` or ``name:value`` pairs separated by commas."""
    if at in ("mean", "latest"):
        return at
    values: dict[str, float] = {}
    for part in at.split(","):
        name, _, number = part.partition(":")
        try:
            values[name] = float(number)
        except ValueError:
            raise InvalidInput(
                "`at` has a value that is not a number",
                errors=[ErrorItem(field="at", message=f"{part!r} is not name:number")],
            ) from None
        if not math.isfinite(values[name]):
            raise InvalidInput(
                "`at` has a value that is not a finite number",
                errors=[ErrorItem(field="at", message=f"{part!r} overflows double precision")],
            )
    return values


MoneyText = Callable[[float], str]


def _price_warnings(
    fit: DemandFit, price: float | None, money: MoneyText | None
) -> list[dict[str, Any]]:
    """A price beyond those the fit has seen, said with amounts written by ``money``."""
    if price is None:
        return []
    w = price_range_warning(fit, price) if money is None else price_range_warning(fit, price, money)
    if w is not None:
        return [{"code": w.code, "message": w.message}]
    return []


def elasticities_at(
    fit: DemandFit, *, at: str, income_like: tuple[str, ...], money: MoneyText | None = None
) -> ElasticityAnswer:
    """The fit's elasticities at a point (see :func:`parse_point`); ``money`` writes the
    amounts in its warnings (the product's currency)."""
    point = parse_point(at)
    known = set(fit.variable_means)
    unknown = sorted(set(point) - known) if isinstance(point, dict) else []
    unknown += sorted(set(income_like) - known)
    if unknown:
        raise InvalidInput(
            "unknown variables for this fit",
            errors=[
                ErrorItem(
                    field="at",
                    message=f"{name!r} is not a variable of the fit; known: "
                    f"{', '.join(sorted(known))}",
                )
                for name in unknown
            ],
        )
    cannot = "elasticities cannot be evaluated at these values"
    with library_errors(subject=cannot, spec_field="at"):
        report = elasticities(fit, at=point, income_like=income_like)
    return ElasticityAnswer(report, _price_warnings(fit, report.point.get("price"), money))


def prediction(
    fit: DemandFit,
    *,
    price: float,
    covariates: dict[str, float],
    cross_prices: dict[str, float],
    unit_cost: float | None,
    level: float,
    money: MoneyText | None = None,
) -> PredictionAnswer:
    """Expected units (and money) at a price and driver values, with an interval;
    ``money`` writes the amounts in its warnings (the product's currency)."""
    unknown = [f"covariates.{n}" for n in covariates if n not in fit.variable_means]
    unknown += [f"cross_prices.{s}" for s in cross_prices if s not in fit.variable_means]
    if unknown:
        raise InvalidInput(
            "unknown variables for this fit",
            errors=[
                ErrorItem(field=name, message="not a variable of the active fit")
                for name in unknown
            ],
        )
    with library_errors(subject="these values cannot enter the model", spec_field="body"):
        result = predict(
            fit,
            price=price,
            covariates=covariates,
            cross_prices=cross_prices,
            unit_cost=unit_cost,
            level=level,
        )
    return PredictionAnswer(result, _price_warnings(fit, price, money))
