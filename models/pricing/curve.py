"""Expected units as a function of the own price, built once from a fit and a scenario.

Every fitted form has a linear predictor ``eta = offset + b * g(price)`` once the other
variables are fixed, with ``g = ln`` for the log-price forms (log-log, poisson) and the
identity otherwise. Expected units are ``max(eta, 0)`` for ``linear`` and ``exp(eta)``
for the others (the log-response forms fold Duan's smearing factor into ``offset``).
Offsets and coefficients may be arrays (one row per coefficient draw), so one curve
evaluates many draws and many prices at once.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Final

import numpy as np

from models._typing import FloatArray
from models.errors import PricingInputError
from models.result import DemandFit
from models.spec import LOG_RESPONSE_FORMS

PRICE: Final = "price"


def scenario_values(fit: DemandFit, scenario: Mapping[str, float] | None) -> dict[str, float]:
    """The fit's default values (:attr:`DemandFit.default_values`: the latest fitted period,
    events off) with the scenario's overrides (own price excluded).

    Raises
    ------
    PricingInputError
        The scenario names the own price, an unknown variable, or a non-finite value.
    """
    values = {k: float(v) for k, v in fit.default_values.items() if k != PRICE}
    for key, value in (scenario or {}).items():
        if key == PRICE:
            raise PricingInputError(
                "the scenario cannot set the own price: it is what the optimisation chooses"
            )
        if key not in values:
            raise PricingInputError(
                f"{fit.sku}: unknown scenario variable {key!r}; known: {sorted(values)}"
            )
        number = float(value)
        if not math.isfinite(number):
            raise PricingInputError(f"scenario value of {key!r} must be a finite number")
        values[key] = number
    return values


def design_row(
    fit: DemandFit, values: Mapping[str, float], *, skip: frozenset[str] = frozenset()
) -> FloatArray:
    """Design row at the scenario; the own price and the sources in ``skip`` get zero."""
    row = np.zeros(len(fit.terms))
    for j, term in enumerate(fit.terms):
        if term.kind == "intercept":
            row[j] = 1.0
        elif term.kind == "own_price" or term.source in skip:
            continue
        elif term.source is not None:
            try:
                row[j] = term.column(values[term.source])
            except ValueError as error:
                raise PricingInputError(f"{fit.sku}: {error}") from error
        else:
            row[j] = fit.regressor_latest[term.name]
    return row


def own_index(fit: DemandFit) -> int:
    """Position of the own-price coefficient."""
    return [t.kind for t in fit.terms].index("own_price")


def log_offset(fit: DemandFit) -> float:
    """What the retransformation adds to ``eta`` on the log scale (log of the smearing factor)."""
    if fit.form in LOG_RESPONSE_FORMS and fit.smearing is not None and fit.smearing > 0:
        return math.log(fit.smearing)
    return 0.0


@dataclass(frozen=True)
class DemandCurve:
    """Expected units of one product against its own price, everything else held fixed.

    Attributes
    ----------
    sku, form : str
    offset : float or FloatArray
        ``eta`` without the own-price term (shape ``(draws, 1)`` for a batch of draws).
    coef : float or FloatArray
        Own-price coefficient, same shape as ``offset``.
    log_price : bool
        The own price enters as ``ln(price)``.
    linear : bool
        Units are ``max(eta, 0)`` (else ``exp(eta)``).

    Examples
    --------
    >>> curve = DemandCurve("X", "log-log", offset=math.log(1000.0), coef=-4.0,
    ...                     log_price=True, linear=False)
    >>> round(float(curve.units(2.0)), 6), round(float(curve.slope(2.0)), 6)
    (62.5, -125.0)
    """

    sku: str
    form: str
    offset: float | FloatArray
    coef: float | FloatArray
    log_price: bool
    linear: bool

    @classmethod
    def from_fit(
        cls,
        fit: DemandFit,
        scenario: Mapping[str, float] | None = None,
        *,
        params: FloatArray | None = None,
    ) -> DemandCurve:
        """The curve of a fit at a scenario (unnamed variables at their default values).

        Seasonal and trend terms take the latest fitted period's values. ``params`` of
        shape ``(draws, k)`` gives one curve per coefficient draw (offsets and
        coefficients of shape ``(draws, 1)``); the default is the fitted coefficients.
        """
        row = design_row(fit, scenario_values(fit, scenario))
        theta = fit.params if params is None else np.asarray(params, dtype=np.float64)
        j = own_index(fit)
        offset: float | FloatArray
        coef: float | FloatArray
        if theta.ndim == 1:
            offset, coef = float(row @ theta) + log_offset(fit), float(theta[j])
        else:
            offset = (theta @ row)[:, None] + log_offset(fit)
            coef = theta[:, j : j + 1]
        return cls(
            sku=fit.sku,
            form=fit.form,
            offset=offset,
            coef=coef,
            log_price=fit.terms[j].transform == "log",
            linear=fit.form == "linear",
        )

    def eta(self, price: FloatArray | float) -> FloatArray:
        p = np.asarray(price, dtype=np.float64)
        term = np.log(p) if self.log_price else p
        result: FloatArray = self.offset + self.coef * term
        return result

    def units(self, price: FloatArray | float) -> FloatArray:
        """Expected units at ``price`` (broadcast against the draws)."""
        eta = self.eta(price)
        if self.linear:
            return np.maximum(eta, 0.0)
        with np.errstate(over="ignore"):
            result: FloatArray = np.exp(eta)
        return result

    def slope(self, price: FloatArray | float) -> FloatArray:
        """``d units / d price`` at ``price``."""
        p = np.asarray(price, dtype=np.float64)
        if self.linear:
            result: FloatArray = np.where(self.eta(p) > 0.0, self.coef, 0.0)
            return result
        dterm = 1.0 / p if self.log_price else 1.0
        derivative: FloatArray = self.units(p) * self.coef * dterm
        return derivative

    def elasticity(self, price: FloatArray | float) -> FloatArray:
        """Own-price elasticity ``d ln units / d ln price`` (NaN where units are zero)."""
        p = np.asarray(price, dtype=np.float64)
        with np.errstate(divide="ignore", invalid="ignore"):
            result: FloatArray = self.slope(p) * p / self.units(p)
        return result

    def price_for_units(self, units: float) -> FloatArray:
        """The price at which expected units equal ``units`` (where the curve is not flat).

        May be non-positive or infinite when no positive price gives those units.
        """
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            if self.linear:
                result: FloatArray = np.asarray((units - self.offset) / self.coef)
                return result
            term = (np.log(units) - self.offset) / self.coef
            inverse: FloatArray = np.asarray(np.exp(term) if self.log_price else term)
        return inverse

    def objective(self, price: FloatArray | float, cost: float) -> FloatArray:
        """``(price - cost) * units``: profit, or revenue with ``cost = 0``."""
        p = np.asarray(price, dtype=np.float64)
        result: FloatArray = (p - cost) * self.units(p)
        return result

    def marginal(self, price: FloatArray | float, cost: float) -> FloatArray:
        """Derivative of :meth:`objective`: ``units + (price - cost) * d units / d price``."""
        p = np.asarray(price, dtype=np.float64)
        result: FloatArray = self.units(p) + (p - cost) * self.slope(p)
        return result

    # Scalar fast paths (plain floats, no numpy overhead) for root finding on one curve.

    def _eta_at(self, price: float) -> float:
        term = math.log(price) if self.log_price else price
        return float(self.offset) + float(self.coef) * term

    def units_at(self, price: float) -> float:
        """:meth:`units` at one price of a single (not batched) curve."""
        eta = self._eta_at(price)
        if self.linear:
            return max(eta, 0.0)
        try:
            return math.exp(eta)
        except OverflowError:
            return math.inf

    def marginal_at(self, price: float, cost: float) -> float:
        """:meth:`marginal` at one price of a single curve."""
        eta = self._eta_at(price)
        coef = float(self.coef)
        if self.linear:
            return max(eta, 0.0) + (price - cost) * (coef if eta > 0.0 else 0.0)
        try:
            units = math.exp(eta)
        except OverflowError:
            units = math.inf
        slope = units * coef / price if self.log_price else units * coef
        return units + (price - cost) * slope

    def objective_at(self, price: float, cost: float) -> float:
        """:meth:`objective` at one price of a single curve."""
        return (price - cost) * self.units_at(price)
