"""Joint demand of a product family whose fits carry cross-price terms.

Product ``i`` has the linear predictor

    eta_i = base_i + sum_k L[i, k] ln(p_k) + sum_k V[i, k] p_k

where row ``i`` of ``L`` (log-price forms) or of ``V`` (level-price forms) holds its own-
and cross-price coefficients on the family's prices; every other variable is folded into
``base_i``. Expected units are ``max(eta, 0)`` for linear fits and ``exp(eta)`` otherwise.
Arrays may carry a leading axis of coefficient draws.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np

from models._typing import BoolArray, FloatArray
from models.pricing.curve import design_row, log_offset, own_index
from models.result import DemandFit


@dataclass(frozen=True)
class FamilyDemand:
    """Expected units of every product of a family against the family's prices.

    Attributes
    ----------
    skus : tuple of str
    base : FloatArray
        ``(n,)`` or ``(draws, n)``.
    coef_log, coef_level : FloatArray
        ``(n, n)`` or ``(draws, n, n)``; row ``i`` is product ``i``'s equation.
    linear : BoolArray
        ``(n,)``: units are ``max(eta, 0)`` rather than ``exp(eta)``.
    """

    skus: tuple[str, ...]
    base: FloatArray
    coef_log: FloatArray
    coef_level: FloatArray
    linear: BoolArray

    @classmethod
    def from_fits(
        cls,
        fits: Sequence[DemandFit],
        values: Sequence[Mapping[str, float]],
        *,
        params: Sequence[FloatArray] | None = None,
    ) -> FamilyDemand:
        """Build from fits (in family order), their scenario values and optionally
        coefficient draws (one ``(draws, k)`` array per fit)."""
        skus = tuple(f.sku for f in fits)
        position = {sku: i for i, sku in enumerate(skus)}
        family = frozenset(skus)
        n = len(fits)
        lead: tuple[int, ...] = (params[0].shape[0],) if params is not None else ()
        base = np.zeros((*lead, n))
        coef_log = np.zeros((*lead, n, n))
        coef_level = np.zeros((*lead, n, n))
        for i, fit in enumerate(fits):
            theta = params[i] if params is not None else fit.params
            row = design_row(fit, values[i], skip=family)
            base[..., i] = theta @ row + log_offset(fit)
            j = own_index(fit)
            target = coef_log if fit.terms[j].transform == "log" else coef_level
            for c, term in enumerate(fit.terms):
                if term.kind == "own_price":
                    target[..., i, i] = theta[..., c]
                elif term.kind == "cross_price" and term.source in position:
                    target[..., i, position[term.source]] = theta[..., c]
        return cls(
            skus=skus,
            base=base,
            coef_log=coef_log,
            coef_level=coef_level,
            linear=np.array([f.form == "linear" for f in fits], dtype=bool),
        )

    @property
    def n(self) -> int:
        return len(self.skus)

    def draw(self, d: int) -> FamilyDemand:
        """The demand of one coefficient draw."""
        return FamilyDemand(
            self.skus, self.base[d], self.coef_log[d], self.coef_level[d], self.linear
        )

    def eta(self, prices: FloatArray) -> FloatArray:
        """Linear predictors at prices of shape ``(..., n)``."""
        logs = np.log(prices)
        result: FloatArray = (
            self.base
            + np.matmul(self.coef_log, logs[..., None])[..., 0]
            + np.matmul(self.coef_level, prices[..., None])[..., 0]
        )
        return result

    def _units(self, eta: FloatArray) -> FloatArray:
        with np.errstate(over="ignore"):
            result: FloatArray = np.where(self.linear, np.maximum(eta, 0.0), np.exp(eta))
        return result

    def units(self, prices: FloatArray) -> FloatArray:
        """Expected units of each product, shape ``(..., n)``."""
        return self._units(self.eta(prices))

    def jacobian(self, prices: FloatArray) -> tuple[FloatArray, FloatArray]:
        """Units ``(..., n)`` and ``d units_i / d price_k`` ``(..., n, n)``."""
        eta = self.eta(prices)
        units = self._units(eta)
        lead = np.where(self.linear, (eta > 0.0).astype(np.float64), units)
        per_price = self.coef_log / prices[..., None, :] + self.coef_level
        jac: FloatArray = lead[..., :, None] * per_price
        return units, jac

    def objective(self, prices: FloatArray, costs: FloatArray) -> FloatArray:
        """Total ``sum_i (p_i - c_i) units_i`` (revenue with zero costs), shape ``(...)``."""
        result: FloatArray = np.sum((prices - costs) * self.units(prices), axis=-1)
        return result

    def objective_and_gradient(
        self, prices: FloatArray, costs: FloatArray
    ) -> tuple[float, FloatArray]:
        """Total objective at one price vector and its gradient (analytic)."""
        units, jac = self.jacobian(prices)
        margin = prices - costs
        gradient: FloatArray = units + margin @ jac
        return float(margin @ units), gradient
