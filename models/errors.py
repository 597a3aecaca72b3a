"""Errors and warnings raised by the numerical library.

Only the service decides which HTTP status an error becomes; these classes say
what went wrong in terms a pricing analyst understands.
"""

from __future__ import annotations


class ModelWarning(UserWarning):
    """Base of numerical warnings issued through :mod:`warnings`."""


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
