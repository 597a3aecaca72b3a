"""Jurisdiction rules: pricing rules a person enters for a product, a family or the whole
catalogue, each under a name of their choosing. Stored here; turned into price limits and
checked against a price in :mod:`service.pricing.rule_limits`.

A rule is in effect from when it is added until it is ended (``ended_at``); an ended rule
stays stored, so that what was in effect at any moment stays known. An emergency rule is
in effect only on the days of its declared period as well (``starts_on`` to ``ends_on``,
both included, UTC dates). These rules are tools that help follow a jurisdiction's rules;
they are not legal advice, and local law and qualified advice decide what applies.
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass
from typing import Any

from sqlalchemy import and_, or_, select
from sqlalchemy.orm import Session

from service.core.audit import write_audit
from service.core.errors import Conflict, ErrorItem, InvalidInput, NotFound
from service.core.tables import JurisdictionRuleRow, ProductRow, as_utc, as_utc_or_none, utcnow

BELOW_COST = "no_sale_below_cost"
EMERGENCY_CAP = "emergency_increase_cap"
MIN_INTERVAL = "min_change_interval"
PRIOR_PRICE_CAP = "prior_price_cap"
PRIOR_PRICE_DAYS = 30
"""The window of the prior-price cap unless the rule gives another (30 days, as in
article 6a of the EU Price Indication Directive 98/6/EC)."""


@dataclass(frozen=True)
class Rule:
    """A stored jurisdiction rule."""

    id: int
    name: str
    kind: str
    applies_to: str
    target: str | None
    max_increase_pct: float | None
    window_days: int | None
    min_interval_days: int | None
    starts_on: dt.date | None
    ends_on: dt.date | None
    note: str | None
    created_by_key_id: str | None
    created_at: dt.datetime
    ended_at: dt.datetime | None
    ended_by_key_id: str | None

    def in_effect(self, at: dt.datetime) -> bool:
        """Whether the rule applies at ``at`` (not yet ended; within its period, if any)."""
        if self.ended_at is not None and self.ended_at <= at:
            return False
        day = at.astimezone(dt.UTC).date()
        if self.starts_on is not None and day < self.starts_on:
            return False
        return self.ends_on is None or day <= self.ends_on

    def applies(self, sku: str, family: str | None) -> bool:
        """Whether the rule is attached to the product ``sku`` of ``family``."""
        if self.applies_to == "catalogue":
            return True
        return self.target == (sku if self.applies_to == "product" else family)

    def to_dict(self) -> dict[str, Any]:
        return dict(vars(self))


def _rule(row: JurisdictionRuleRow) -> Rule:
    return Rule(
        id=row.id,
        name=row.name,
        kind=row.kind,
        applies_to=row.applies_to,
        target=row.target,
        max_increase_pct=row.max_increase_pct,
        window_days=row.window_days,
        min_interval_days=row.min_interval_days,
        starts_on=row.starts_on,
        ends_on=row.ends_on,
        note=row.note,
        created_by_key_id=row.created_by_key_id,
        created_at=as_utc(row.created_at),
        ended_at=as_utc_or_none(row.ended_at),
        ended_by_key_id=row.ended_by_key_id,
    )


def add(session: Session, *, values: dict[str, Any], actor_key_id: str | None) -> Rule:
    """Store a new rule (``values`` checked at the HTTP edge); a product rule names an
    existing sku. Two rules in effect may not share a name: the name is how answers say
    which rule bound a price."""
    if values["applies_to"] == "product" and (
        session.scalar(select(ProductRow.id).where(ProductRow.sku == values["target"])) is None
    ):
        raise InvalidInput(
            f"no product with sku {values['target']!r} to attach the rule to",
            errors=[ErrorItem(field="target", message="no such product")],
        )
    taken = session.scalar(
        select(JurisdictionRuleRow.id).where(
            JurisdictionRuleRow.name == values["name"], JurisdictionRuleRow.ended_at.is_(None)
        )
    )
    if taken is not None:
        raise Conflict(
            f"a rule named {values['name']!r} is already in effect (rule {taken}); end it "
            "first or choose another name",
            errors=[ErrorItem(field="name", message="already used by a rule in effect")],
        )
    row = JurisdictionRuleRow(**values, created_by_key_id=actor_key_id, created_at=utcnow())
    session.add(row)
    session.flush()
    rule = _rule(row)
    write_audit(
        session,
        actor_key_id=actor_key_id,
        action="add_rule",
        subject=f"rule:{rule.id}",
        details=_audit_details(rule),
        at=rule.created_at,
    )
    return rule


def _audit_details(rule: Rule) -> dict[str, Any]:
    out = rule.to_dict()
    for name in ("starts_on", "ends_on", "created_at", "ended_at"):
        value = out[name]
        out[name] = None if value is None else value.isoformat()
    return out


def get_or_raise(session: Session, rule_id: int) -> Rule:
    row = session.get(JurisdictionRuleRow, rule_id)
    if row is None:
        raise NotFound(f"no jurisdiction rule has id {rule_id}")
    return _rule(row)


def end(session: Session, *, rule_id: int, actor_key_id: str | None) -> Rule:
    """End a rule now: it no longer applies to prices worked out or approved from now on,
    and stays stored."""
    row = session.get(JurisdictionRuleRow, rule_id, with_for_update=True)
    if row is None:
        raise NotFound(f"no jurisdiction rule has id {rule_id}")
    if row.ended_at is not None:
        raise Conflict(
            f"rule {rule_id} ({row.name!r}) was already ended at {as_utc(row.ended_at).isoformat()}"
        )
    row.ended_at = utcnow()
    row.ended_by_key_id = actor_key_id
    session.flush()
    rule = _rule(row)
    write_audit(
        session,
        actor_key_id=actor_key_id,
        action="end_rule",
        subject=f"rule:{rule.id}",
        details=_audit_details(rule),
        at=rule.ended_at,
    )
    return rule


def _applies(sku: str | None, family: str | None) -> Any:
    """The rules attached to the catalogue, to the product ``sku`` or to ``family``."""
    clauses = [JurisdictionRuleRow.applies_to == "catalogue"]
    if sku is not None:
        clauses.append(
            and_(JurisdictionRuleRow.applies_to == "product", JurisdictionRuleRow.target == sku)
        )
    if family is not None:
        clauses.append(
            and_(JurisdictionRuleRow.applies_to == "family", JurisdictionRuleRow.target == family)
        )
    return or_(*clauses)


def listed(
    session: Session,
    *,
    sku: str | None = None,
    family: str | None = None,
    in_effect_at: dt.datetime | None = None,
) -> list[Rule]:
    """Rules by id; with ``sku`` (and the product's family) or ``family``, those that
    apply to it; with ``in_effect_at``, only those in effect then."""
    query = select(JurisdictionRuleRow).order_by(JurisdictionRuleRow.id)
    if sku is not None or family is not None:
        query = query.where(_applies(sku, family))
    if in_effect_at is not None:  # ended ones never come back: leave them in the database
        query = query.where(
            or_(
                JurisdictionRuleRow.ended_at.is_(None),
                JurisdictionRuleRow.ended_at > in_effect_at,
            )
        )
    rules = [_rule(r) for r in session.scalars(query)]
    if in_effect_at is not None:
        rules = [r for r in rules if r.in_effect(in_effect_at)]
    return rules


def in_effect(session: Session, *, sku: str, family: str | None, at: dt.datetime) -> list[Rule]:
    """The rules that apply to a product at ``at``."""
    return listed(session, sku=sku, family=family, in_effect_at=at)
