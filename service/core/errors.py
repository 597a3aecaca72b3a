"""Domain errors: what went wrong, in the terms of the service, with no transport in sight.

Use cases raise these; :mod:`service.core.problems` alone decides what a client of the
HTTP API sees, and the jobs record their ``detail`` as a product's failure reason.
The numerical library's own errors become domain errors in :func:`from_library`, the one
place that knows them.
"""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from sqlalchemy.exc import DBAPIError, InterfaceError, OperationalError

from models import (
    InfeasibleConstraintsError,
    InsufficientDataError,
    InvalidConstraintsError,
    MissingUnitCostError,
    PricingInputError,
    SpecError,
    UnusableDataError,
    WrongSignError,
)


@dataclass
class ErrorItem:
    """One reason a request was refused, pointing at a field or a CSV line and column."""

    message: str
    field: str | None = None
    line: int | None = None
    column: str | None = None

    def to_dict(self) -> dict[str, Any]:
        return {k: v for k, v in self.__dict__.items() if v is not None}


@dataclass
class ServiceError(Exception):
    """Base of every error a caller may see: a sentence, and where the trouble is."""

    detail: str
    errors: list[ErrorItem] = field(default_factory=list)

    def __str__(self) -> str:
        return self.detail


class InvalidInput(ServiceError):
    """The input cannot be used as given."""


class NotFound(ServiceError):
    """The thing asked for does not exist."""


class ProductNotFound(NotFound):
    """No product has the given sku."""


class NoActiveFit(NotFound):
    """The product has no fit that pricing may use."""


class Conflict(ServiceError):
    """The request conflicts with the current state of the records."""


@dataclass
class WrongSign(Conflict):
    """The fit says demand rises with price; pricing refuses unless allow_wrong_sign is set."""

    reason: str = ""


class PayloadTooLarge(ServiceError):
    """The request body is over the configured limit."""


class UnsupportedMediaType(ServiceError):
    """The request body is not of a type the operation reads."""


class Unauthenticated(ServiceError):
    """No credentials, or unknown or revoked ones."""


class Forbidden(ServiceError):
    """The credentials lack the scope the operation needs."""


class Unavailable(ServiceError):
    """The database cannot be reached right now; retrying later may work."""


class StorageFull(Unavailable):
    """The database's storage is full: nothing more can be written until room is made."""


SQLITE_FULL = 13  # SQLite's result code for "database or disk is full"
DISK_FULL_SQLSTATE = "53100"  # PostgreSQL's disk_full


def is_storage_full(exc: BaseException) -> bool:
    """Whether a database error says its storage is full (SQLite's SQLITE_FULL,
    PostgreSQL's SQLSTATE 53100), as opposed to the database being out of reach."""
    orig = exc.orig if isinstance(exc, DBAPIError) else exc
    if getattr(orig, "sqlstate", None) == DISK_FULL_SQLSTATE:
        return True
    if getattr(orig, "sqlite_errorcode", None) == SQLITE_FULL:
        return True
    return "database or disk is full" in str(orig)


def database_cause(exc: BaseException) -> str:
    """The driver's error class and first line, for logs: never the statement's values."""
    orig = exc.orig if isinstance(exc, DBAPIError) else exc
    text = str(orig).strip()
    first = text.splitlines()[0][:300] if text else ""
    return f"{type(orig).__name__}: {first}" if first else type(orig).__name__


class ClusterUnavailable(Unavailable):
    """A job's cluster cannot be reached or started, or cannot be used with this database."""


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
    per thread, so concurrent requests do not affect each other). Underflow stays
    silent: a tiny value becoming zero is harmless."""
    with np.errstate(over="raise", divide="raise", invalid="raise", under="ignore"):
        yield


def numeric_reason(exc: BaseException) -> str:
    """A short, client-safe description of a numerical failure."""
    if isinstance(exc, np.linalg.LinAlgError):
        return f"the equations are degenerate ({exc})"
    if isinstance(exc, ZeroDivisionError) or "divide by zero" in str(exc):
        return "a statistic divides by zero (values that are all zero or never vary?)"
    return f"the values are too large or too small for double precision ({exc})"


def is_outage(exc: BaseException) -> bool:
    """Whether ``exc`` says the database itself is unreachable, locked or full (a whole
    job stops then), rather than that one product's stored values cannot be used."""
    if isinstance(exc, Unavailable | MemoryError):
        return True
    if isinstance(exc, DBAPIError):
        return bool(exc.connection_invalidated) or isinstance(
            exc, OperationalError | InterfaceError
        )
    return False


def failure_reason(exc: BaseException) -> str:
    """A short sentence for a product's failure in a job, safe to show and to store: a
    domain error's detail, a numerical failure's description, or the error's class and
    message (never a database statement or its parameters)."""
    if isinstance(exc, ServiceError):
        return exc.detail
    if isinstance(exc, NUMERIC_FAILURES):
        return numeric_reason(exc)
    if isinstance(exc, DBAPIError):
        first = str(exc.orig).strip().splitlines()[0] if str(exc.orig).strip() else ""
        return f"the database refused a stored value ({type(exc.orig).__name__}: {first[:200]})"
    text = str(exc).strip().splitlines()[0] if str(exc).strip() else ""
    return f"{type(exc).__name__}: {text[:200]}" if text else type(exc).__name__


def unusable(what: str, exc: BaseException, *, field: str = "body") -> InvalidInput:
    """A numerical failure while computing ``what``, as invalid input with a way out."""
    message = f"{what}: {numeric_reason(exc)}"
    return InvalidInput(
        message + "; rescale the values (e.g. prices in thousands) or choose another form",
        errors=[ErrorItem(field=field, message=message)],
    )


LIBRARY_ERRORS: tuple[type[Exception], ...] = (
    SpecError,
    InsufficientDataError,
    UnusableDataError,
    PricingInputError,
    WrongSignError,
    *NUMERIC_FAILURES,
)
"""The numerical library's errors that :func:`from_library` turns into domain errors."""


RULE_LIMIT_PREFIX = "rule:"
"""How the service names a jurisdiction rule's price limit to the library
(:mod:`service.pricing.rule_limits`), so that answers can tell rules from constraints."""


def from_library(
    exc: Exception,
    *,
    subject: str = "",
    spec_field: str = "spec",
    sku: str | None = None,
    gate_min_observations: int | None = None,
) -> ServiceError:
    """The numerical library's error ``exc`` as a domain error.

    ``subject`` says what was being computed ("no price can be recommended from this
    fit"); ``spec_field`` is where a model specification came from; ``sku`` the product.
    """
    if isinstance(exc, SpecError):
        return InvalidInput(
            "the model specification is invalid",
            errors=[
                ErrorItem(
                    field=f"{spec_field}.{name}" if name != "spec" else spec_field,
                    message=message,
                )
                for name, message in exc.problems
            ],
        )
    if isinstance(exc, InsufficientDataError):
        return InvalidInput(
            f"not enough data to fit {exc.sku!r}: {exc.n_obs} usable observations, the model "
            f"needs at least {exc.n_required} ({exc.n_missing} more)"
            + (
                f"; to become the active fit it needs at least {gate_min_observations} "
                "(the enough_observations gate)"
                if gate_min_observations and gate_min_observations > exc.n_required
                else ""
            ),
            errors=[ErrorItem(field="observations", message=str(exc))],
        )
    if isinstance(exc, UnusableDataError):
        return InvalidInput(
            f"the data of {sku!r} cannot support this model: {exc}"
            if sku
            else f"{subject or 'the data cannot support this model'}: {exc}",
            errors=[ErrorItem(field=spec_field, message=str(exc))],
        )
    if isinstance(exc, WrongSignError):
        return WrongSign(
            f'{exc.reason} Refusing to optimise; send "allow_wrong_sign": true to optimise anyway.',
            reason=exc.reason,
        )
    if isinstance(exc, InfeasibleConstraintsError):
        return InvalidInput(
            "no price satisfies every constraint and jurisdiction rule: "
            + str(exc).replace(RULE_LIMIT_PREFIX, "jurisdiction rule ")
            if any(n.startswith(RULE_LIMIT_PREFIX) for n in exc.constraints)
            else f"no price satisfies every constraint: {exc}",
            errors=[
                ErrorItem(
                    field="rules",
                    message=f"jurisdiction rule {name.removeprefix(RULE_LIMIT_PREFIX)} "
                    "conflicts with the others",
                )
                if name.startswith(RULE_LIMIT_PREFIX)
                else ErrorItem(field=f"constraints.{name}", message="conflicts with the others")
                for name in exc.constraints
            ],
        )
    if isinstance(exc, InvalidConstraintsError):
        return InvalidInput(
            "the constraints are invalid",
            errors=[
                ErrorItem(field=f"constraints.{name}", message=message)
                for name, message in exc.problems
            ],
        )
    if isinstance(exc, MissingUnitCostError):
        return InvalidInput(str(exc), errors=[ErrorItem(field="unit_cost", message=str(exc))])
    if isinstance(exc, PricingInputError):
        return InvalidInput(str(exc), errors=[ErrorItem(field="body", message=str(exc))])
    if isinstance(exc, NUMERIC_FAILURES):
        return unusable(subject or "the computation failed", exc, field=spec_field)
    raise TypeError(f"not an error of the numerical library: {exc!r}") from exc


@contextmanager
def library_errors(
    *,
    subject: str = "",
    spec_field: str = "spec",
    sku: str | None = None,
    gate_min_observations: int | None = None,
) -> Iterator[None]:
    """Run library code with floating-point traps on; its errors leave as domain errors."""
    try:
        with strict_floats():
            yield
    except LIBRARY_ERRORS as exc:
        raise from_library(
            exc,
            subject=subject,
            spec_field=spec_field,
            sku=sku,
            gate_min_observations=gate_min_observations,
        ) from None
