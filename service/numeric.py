"""Floating-point trouble in the numerical library, turned into answers a client can act on.

Inside :func:`strict_floats` numpy raises on overflow, division by zero and invalid
operations instead of warning and carrying on with infinities or NaN. A history whose
numbers double precision cannot handle (prices of 1e300, say) then stops with its reason,
rather than producing figures nobody can trust. Underflow stays silent: a tiny value
becoming zero is harmless.
"""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager

import numpy as np

from service.errors import ErrorItem, InvalidInput

# What the library raises when the numbers themselves defeat it (not a bad request shape).
NUMERIC_FAILURES: tuple[type[Exception], ...] = (
    FloatingPointError,
    ZeroDivisionError,
    OverflowError,
    np.linalg.LinAlgError,
)


@contextmanager
def strict_floats() -> Iterator[None]:
    """Raise FloatingPointError where numpy would produce inf or NaN (numpy's state is
    per thread, so concurrent requests do not affect each other)."""
    with np.errstate(over="raise", divide="raise", invalid="raise", under="ignore"):
        yield


def reason(exc: BaseException) -> str:
    """A short, client-safe description of a numerical failure."""
    if isinstance(exc, np.linalg.LinAlgError):
        return f"the equations are degenerate ({exc})"
    if isinstance(exc, ZeroDivisionError) or "divide by zero" in str(exc):
        return "a statistic divides by zero (values that are all zero or never vary?)"
    return f"the values are too large or too small for double precision ({exc})"


def unusable(what: str, exc: BaseException, *, field: str = "body") -> InvalidInput:
    """The 422 for a numerical failure while computing ``what``."""
    message = f"{what}: {reason(exc)}"
    return InvalidInput(
        message + "; rescale the values (e.g. prices in thousands) or choose another form",
        errors=[ErrorItem(field=field, message=message)],
    )
