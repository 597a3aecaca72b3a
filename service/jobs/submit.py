"""Submitting a job: the one use case behind ``POST /v1/jobs``, schedules and the CLI.

A job's options are checked before it is queued, so a mistake is refused at once with
its reason instead of failing every product of the night.
"""

from __future__ import annotations

from typing import Any

from pydantic import ValidationError
from sqlalchemy import select
from sqlalchemy.orm import Session

from service.core.errors import ErrorItem, InvalidInput
from service.core.tables import JobRow, ProductRow
from service.estimation import fits
from service.jobs import queue
from service.pricing.schemas import OptimalPriceRequest


def check_options(
    *,
    kind: str,
    refit_unchanged: bool,
    spec: dict[str, Any] | None,
    request: dict[str, Any] | None,
    prefix: str = "",
) -> None:
    """A reprice job's request and a refit job's spec, checked before queueing."""
    if kind == "reprice" and request is not None:
        try:
            OptimalPriceRequest.model_validate(request)
        except ValidationError as exc:
            raise InvalidInput(
                "the reprice request is invalid",
                errors=[
                    ErrorItem(
                        field=f"{prefix}request." + ".".join(str(p) for p in e["loc"]),
                        message=e["msg"],
                    )
                    for e in exc.errors()
                ],
            ) from None
    if kind == "refit" and spec is not None:
        fits.parse_spec(spec, field_prefix=f"{prefix}spec")
        if not refit_unchanged:
            raise InvalidInput(
                "a refit with a given spec needs refit_unchanged: without it, products whose "
                "history has not changed keep their fits and the spec is never used",
                errors=[
                    ErrorItem(field=f"{prefix}refit_unchanged", message="must be true with a spec")
                ],
            )


def check_scope(session: Session, scope: dict[str, Any]) -> None:
    """A family scope must name a family that has products."""
    family = scope.get("family")
    if (
        family is not None
        and session.scalar(select(ProductRow.id).where(ProductRow.family == family).limit(1))
        is None
    ):
        raise InvalidInput(
            f"no products in family {family!r}",
            errors=[ErrorItem(field="scope.family", message="no product has this family")],
        )


def submit(
    session: Session,
    *,
    kind: str,
    scope: object,
    refit_unchanged: bool = False,
    spec: dict[str, Any] | None = None,
    request: dict[str, Any] | None = None,
) -> JobRow:
    """Check a job's options and scope, then queue it."""
    check_options(kind=kind, refit_unchanged=refit_unchanged, spec=spec, request=request)
    normalised = queue.normalise_scope(scope)
    check_scope(session, normalised)
    return queue.create(
        session,
        kind=kind,
        scope=normalised,
        refit_unchanged=refit_unchanged,
        spec=spec,
        request=request,
    )
