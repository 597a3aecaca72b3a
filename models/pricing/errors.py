"""Errors of price optimisation.

The classes say what went wrong in a pricing analyst's terms; the service maps them to
HTTP statuses (input problems and infeasible constraints to 422, a wrong-signed own-price
effect to 409).
"""

from __future__ import annotations

from collections.abc import Sequence


class PricingInputError(ValueError):
    """A request the optimiser cannot answer as posed (missing or invalid input)."""


class MissingUnitCostError(PricingInputError):
    """The profit objective or a margin floor needs a unit cost that was not given.

    Attributes
    ----------
    skus : list of str
        Products without a unit cost.
    needed_by : str
        ``"objective=profit"`` or ``"min_margin_pct"``.
    """

    def __init__(self, skus: Sequence[str], needed_by: str) -> None:
        self.skus = list(skus)
        self.needed_by = needed_by
        names = ", ".join(self.skus)
        super().__init__(f"{needed_by} needs a unit cost, and none was given for {names}")


class InvalidConstraintsError(PricingInputError):
    """Constraint values that make no sense on their own (a negative step, an ending of 1.2).

    Attributes
    ----------
    problems : list of (field, message)
        Every problem found, so a client can fix them in one go.
    """

    def __init__(self, problems: Sequence[tuple[str, str]]) -> None:
        self.problems = list(problems)
        super().__init__("; ".join(f"{name}: {message}" for name, message in self.problems))


class InfeasibleConstraintsError(PricingInputError):
    """No price satisfies every constraint at once.

    Attributes
    ----------
    constraints : list of str
        Names of the constraints that conflict (in a family prefixed with the sku,
        e.g. ``"TEA-004.max_price"``, or ``"order:TEA-004<=TEA-005"``).
    """

    def __init__(self, constraints: Sequence[str], message: str) -> None:
        self.constraints = list(dict.fromkeys(constraints))
        super().__init__(message)


class UnboundedObjectiveError(PricingInputError):
    """The objective improves without limit and no constraint stops the price.

    Attributes
    ----------
    sku : str
    direction : str
        ``"above"`` (improves as the price rises: inelastic demand) or ``"below"``.
    """

    def __init__(self, sku: str, direction: str, message: str) -> None:
        self.sku = sku
        self.direction = direction
        super().__init__(message)


class WrongSignError(ValueError):
    """The fitted own-price effect says demand rises with price, so no optimum is meaningful.

    Pass ``force=True`` to optimise anyway (the result then carries a warning).

    Attributes
    ----------
    skus : list of str
        The products concerned.
    coefficients : dict of str to float
        Their own-price coefficients.
    reason : str
        Why the fit is not optimisable, in words.
    """

    def __init__(self, coefficients: dict[str, float], reason: str) -> None:
        self.skus = list(coefficients)
        self.coefficients = dict(coefficients)
        self.reason = reason
        super().__init__(reason)
