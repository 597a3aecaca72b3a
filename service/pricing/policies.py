"""Approval policies: limits a person sets, within which stored recommendations are
approved without waiting for one (a product, a family or the whole catalogue).

A recommendation matches a policy when its price change is under the policy's
``max_change_pct`` (in either direction) and, if the policy sets ``min_margin_pct``,
its margin is above it. The most specific policy decides (product, then family, then
catalogue; the oldest first among equals). Policies are ended, never deleted, so the
price record can always say which one approved a price.
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass
from typing import Any

from sqlalchemy import select, update
from sqlalchemy.orm import Session

from service.core.audit import write_audit
from service.core.errors import Conflict, ErrorItem, InvalidInput, NotFound
from service.core.tables import ApprovalPolicyRow, ProductRow, as_utc, as_utc_or_none, utcnow

SPECIFICITY = {"product": 0, "family": 1, "catalogue": 2}


@dataclass(frozen=True)
class Policy:
    id: int
    name: str
    applies_to: str
    target: str | None
    max_change_pct: float
    min_margin_pct: float | None
    created_by_key_id: str | None
    created_at: dt.datetime
    ended_at: dt.datetime | None

    def covers(self, *, sku: str, family: str | None) -> bool:
        if self.applies_to == "product":
            return self.target == sku
        if self.applies_to == "family":
            return family is not None and self.target == family
        return True

    def allows(self, result: dict[str, Any]) -> bool:
        """Whether a recommendation's figures are within the policy's limits."""
        change = result.get("change_pct")
        if change is None or not abs(float(change)) < self.max_change_pct:
            return False
        if self.min_margin_pct is None:
            return True
        margin = (result.get("recommended") or {}).get("margin_pct")
        return margin is not None and float(margin) > self.min_margin_pct


def _policy(row: ApprovalPolicyRow) -> Policy:
    return Policy(
        id=row.id,
        name=row.name,
        applies_to=row.applies_to,
        target=row.target,
        max_change_pct=row.max_change_pct,
        min_margin_pct=row.min_margin_pct,
        created_by_key_id=row.created_by_key_id,
        created_at=as_utc(row.created_at),
        ended_at=as_utc_or_none(row.ended_at),
    )


def list_policies(session: Session, *, include_ended: bool) -> list[Policy]:
    query = select(ApprovalPolicyRow).order_by(ApprovalPolicyRow.id)
    if not include_ended:
        query = query.where(ApprovalPolicyRow.ended_at.is_(None))
    return [_policy(r) for r in session.scalars(query)]


def active_policies(session: Session) -> list[Policy]:
    return list_policies(session, include_ended=False)


def matching_policy(
    policies: list[Policy], *, sku: str, family: str | None, result: dict[str, Any]
) -> Policy | None:
    """The most specific policy that covers the product and allows the figures."""
    covering = sorted(
        (p for p in policies if p.covers(sku=sku, family=family)),
        key=lambda p: (SPECIFICITY[p.applies_to], p.id),
    )
    # The most specific covering policy decides, even when it does not allow the figures:
    # a narrow limit for one product is not overruled by a wider one for the catalogue.
    if covering and covering[0].allows(result):
        return covering[0]
    return None


def create_policy(
    session: Session,
    *,
    actor_key_id: str | None,
    name: str,
    applies_to: str,
    target: str | None,
    max_change_pct: float,
    min_margin_pct: float | None,
) -> Policy:
    if (applies_to == "catalogue") != (target is None):
        raise InvalidInput(
            "a catalogue policy names no target; a product or family policy names one",
            errors=[ErrorItem(field="target", message=f"not valid for {applies_to}")],
        )
    if (
        applies_to == "product"
        and session.scalar(select(ProductRow.id).where(ProductRow.sku == target)) is None
    ):
        raise NotFound(f"no product has sku {target!r}")
    now = utcnow()
    row = ApprovalPolicyRow(
        name=name,
        applies_to=applies_to,
        target=target,
        max_change_pct=max_change_pct,
        min_margin_pct=min_margin_pct,
        created_by_key_id=actor_key_id,
        created_at=now,
    )
    session.add(row)
    session.flush()
    policy = _policy(row)
    write_audit(
        session,
        actor_key_id=actor_key_id,
        action="create_approval_policy",
        subject=f"policy:{row.id}",
        details={
            "name": name,
            "applies_to": applies_to,
            "target": target,
            "max_change_pct": max_change_pct,
            "min_margin_pct": min_margin_pct,
        },
        at=now,
    )
    return policy


def end_policy(session: Session, *, actor_key_id: str | None, policy_id: int) -> None:
    """End a policy: it approves nothing from now on, and stays on record."""
    now = utcnow()
    done = session.execute(
        update(ApprovalPolicyRow)
        .where(ApprovalPolicyRow.id == policy_id, ApprovalPolicyRow.ended_at.is_(None))
        .values(ended_at=now, ended_by_key_id=actor_key_id)
        .execution_options(synchronize_session=False)
    )
    if not done.rowcount:  # type: ignore[attr-defined]
        exists = session.scalar(
            select(ApprovalPolicyRow.id).where(ApprovalPolicyRow.id == policy_id)
        )
        if exists is None:
            raise NotFound(f"no approval policy has id {policy_id}")
        raise Conflict(f"approval policy {policy_id} has already ended")
    write_audit(
        session,
        actor_key_id=actor_key_id,
        action="end_approval_policy",
        subject=f"policy:{policy_id}",
        details={},
        at=now,
    )
