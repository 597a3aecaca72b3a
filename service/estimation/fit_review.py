"""A person decides about fits: the hold-out comparison that compares like with like,
and activating a chosen fit version (a rejected one with a reason, or an earlier one).

The hold-out gate scores forecasts, and forecasts say nothing about which of two ways of
identifying the price effect is right: a fit whose instruments differ from the active
fit's (two-stage least squares against least squares, or other instruments) may forecast
worse and still estimate the elasticity better. When the new spec identifies the price
effect differently, the gate leaves the decision to a person: the fit is stored as
``awaiting_review`` and becomes active only when a key with the ``approve`` scope
activates it.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any, Final

from sqlalchemy import select, update
from sqlalchemy.orm import Session

from service.core.audit import write_audit
from service.core.errors import Conflict, ErrorItem, InvalidInput, NotFound
from service.core.tables import FitRow, ProductRow, utcnow
from service.estimation.gates import ACTIVE, REJECTED, SUPERSEDED, GateResult

AWAITING_REVIEW: Final = "awaiting_review"
"""A stored fit on which the quality gates left the decision to a person."""
HOLDOUT_GATE = "holdout_not_worse"


def identification(spec: Mapping[str, Any]) -> dict[str, list[str]]:
    """How a spec identifies the own-price effect: its excluded instruments (none means
    least squares), and which of them enter as logs."""
    return {
        "instruments": sorted(spec.get("instruments") or ()),
        "log_instruments": sorted(spec.get("log_instruments") or ()),
    }


def _describe(ident: Mapping[str, list[str]]) -> str:
    if not ident["instruments"]:
        return "least squares, no instruments"
    return "two-stage least squares with " + ", ".join(ident["instruments"])


def holdout_undecided(
    new_spec: Mapping[str, Any], active_spec: Mapping[str, Any] | None, *, sku: str
) -> GateResult | None:
    """The hold-out gate's answer when the two specs identify the price effect
    differently (it does not decide), else None (the WAPE comparison stands)."""
    if active_spec is None:
        return None
    new, old = identification(new_spec), identification(active_spec)
    if new == old:
        return None
    return GateResult(
        HOLDOUT_GATE,
        True,
        f"not decided: this fit identifies the price effect by {_describe(new)}, the active "
        f"fit by {_describe(old)}; hold-out forecast error cannot tell which elasticity is "
        f"right. A person must review both fits and, to use this one, activate it with POST "
        f"/v1/products/{sku}/fits/ID/activate, ID being this fit's id (a key with the "
        "approve scope)",
    )


def review_step(row: FitRow, sku: str) -> str | None:
    """What a person must do about a fit the gates did not decide on (else None)."""
    if row.status != AWAITING_REVIEW:
        return None
    return (
        f"The quality gates did not decide on fit version {row.version}: review it against "
        f"the active fit and, to use it, activate it with POST /v1/products/{sku}/fits/"
        f"{row.id}/activate (a key with the approve scope)."
    )


@dataclass(frozen=True)
class Activation:
    """A fit version a person made active, and the one it replaced (if any)."""

    fit: FitRow
    previous_id: int | None
    previous_version: int | None
    action: str


def activate_version(
    session: Session,
    *,
    product: ProductRow,
    fit_id: int,
    reason: str | None,
    key_id: str | None,
) -> Activation:
    """Make a stored fit version the product's active fit, by a person's decision: a
    rejected fit needs a reason; an earlier (superseded) version is restored. The fit it
    replaces is superseded, and the audit log records who did it and why."""
    if session.get_bind().dialect.name == "postgresql":
        # The same lock the fit store takes: one activation of a product at a time.
        session.execute(select(ProductRow.id).where(ProductRow.id == product.id).with_for_update())
    row = session.scalar(select(FitRow).where(FitRow.id == fit_id, FitRow.product_id == product.id))
    if row is None:
        raise NotFound(f"product {product.sku!r} has no fit {fit_id}")
    if row.status == ACTIVE:
        raise Conflict(f"fit version {row.version} of {product.sku!r} is already the active fit")
    if row.status == REJECTED and not (reason and reason.strip()):
        raise InvalidInput(
            f"fit version {row.version} of {product.sku!r} was rejected by the quality gates; "
            "activating it needs a reason",
            errors=[ErrorItem(field="body.reason", message="required for a rejected fit")],
        )
    previous = session.execute(
        select(FitRow.id, FitRow.version).where(
            FitRow.product_id == product.id, FitRow.status == ACTIVE
        )
    ).first()
    if previous is not None:
        session.execute(update(FitRow).where(FitRow.id == previous.id).values(status=SUPERSEDED))
        session.flush()
    action = {SUPERSEDED: "restore_fit"}.get(row.status, "activate_fit")
    now = utcnow()
    decision = {
        "by_key_id": key_id,
        "at": now.isoformat(),
        "reason": reason,
        "status_before": row.status,
    }
    row.gates = {**(row.gates or {"passed": False, "checks": []}), "decision": decision}
    row.status = ACTIVE
    session.flush()
    write_audit(
        session,
        actor_key_id=key_id,
        action=action,
        subject=product.sku,
        details={
            "fit_id": row.id,
            "version": row.version,
            "status_before": decision["status_before"],
            "reason": reason,
            "replaced_fit_id": None if previous is None else previous.id,
            "replaced_version": None if previous is None else previous.version,
        },
        at=now,
    )
    return Activation(
        fit=row,
        previous_id=None if previous is None else previous.id,
        previous_version=None if previous is None else previous.version,
        action=action,
    )
