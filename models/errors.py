"""Every error the numerical library raises, in one place.

Only the service decides which HTTP status an error becomes; these classes say
what went wrong in terms a pricing analyst understands. Fitting raises
:class:`SpecError`, :class:`InsufficientDataError` and :class:`UnusableDataError`;
price optimisation raises :class:`PricingInputError` (and its subclasses) and
:class:`WrongSignError`.
"""

from __future__ import annotations

from collections.abc import Sequence


class InsufficientDataError(ValueError):
    """A product has too few usable observations for the requested model.

    Parameters
    ----------
    sku : str
        The product concerned.
    n_obs : int
        Usable observations after exclusions.
    n_required : int
        Observations the model needs.
    detail : str, optional
        Why observations were lost (exclusions, window), appended to the message.
    """

    def __init__(self, sku: str, n_obs: int, n_required: int, detail: str = "") -> None:
        self.sku = sku
        self.n_obs = n_obs
        self.n_required = n_required
        self.n_missing = max(n_required - n_obs, 0)
        message = (
            f"{sku}: {n_obs} usable observations, the model needs at least {n_required} "
            f"({self.n_missing} more)"
        )
        if detail:
            message += f"; {detail}"
        super().__init__(message)

    def __reduce__(self) -> tuple[type[InsufficientDataError], tuple[str, int, int]]:
        return (type(self), (self.sku, self.n_obs, self.n_required))


class UnusableDataError(ValueError):
    """The data cannot support the model (own price never varies, log of a non-positive value)."""


class SpecError(ValueError):
    """An invalid model specification.

    Attributes
    ----------
    problems : list of (field, message)
        Every problem found, so a client can fix them in one go.
    """

    def __init__(self, problems: Sequence[tuple[str, str]]) -> None:
        self.problems = list(problems)
        super().__init__("; ".join(f"{name}: {message}" for name, message in self.problems))


# ----------------------------------------------------------------------------- pricing


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

    Pass ``allow_wrong_sign=True`` to optimise anyway (the result then carries a warning).

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
