"""The reviewed path of a stored recommendation: approve (possibly at an edited price) or
decline, by a person or an approval policy; a newer proposed recommendation supersedes older ones.

Every step is a conditional update (``... WHERE state = 'proposed'``): whatever runs at
the same time, a recommendation is decided once, and a declined or superseded one is never
approved. An approval adds the live price to the price record
(:mod:`service.pricing.price_record`) and an entry to the audit log, in one transaction.
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

from sqlalchemy import and_, bindparam, select, update
from sqlalchemy.orm import Session

from service.core.audit import write_audit
from service.core.errors import Conflict, ErrorItem, InvalidInput, NotFound
from service.core.tables import ProductRow, RecommendationRow, as_utc_or_none, to_utc, utcnow
from service.pricing import price_record, rule_limits
from service.pricing.policies import Policy, active_policies, matching_policy

PROPOSED, APPROVED, DECLINED, SUPERSEDED = "proposed", "approved", "declined", "superseded"
CLOCK_SKEW = dt.timedelta(minutes=1)
"""How far in the past an approval's effective_at may lie (clocks of callers differ)."""


@dataclass(frozen=True)
class Decision:
    """A decided recommendation: its row's review fields and the product's sku."""

    recommendation_id: int
    sku: str
    state: str
    price: float | None
    entry: price_record.PriceEntry | None


def review_fields(row: RecommendationRow) -> dict[str, Any]:
    """The review part of a stored recommendation's answer."""
    return {
        "state": row.state,
        "decided_at": as_utc_or_none(row.decided_at),
        "decided_by_key_id": row.decided_by_key_id,
        "policy_id": row.policy_id,
        "approved_price": row.approved_price,
        "note": row.note,
    }


def rule_breaches(session: Session, *, product_id: int, price: float, at: dt.datetime) -> list[str]:
    """The names of the jurisdiction rules that ``price`` would break for the product
    from ``at``: the one question an approval asks of the rules before a price goes live
    (:func:`service.pricing.rule_limits.rule_breaches`)."""
    return rule_limits.rule_breaches(session, product_id=product_id, price=price, at=at)


def _row_and_sku(session: Session, recommendation_id: int) -> tuple[RecommendationRow, str]:
    found = session.execute(
        select(RecommendationRow, ProductRow.sku)
        .join(ProductRow, ProductRow.id == RecommendationRow.product_id)
        .where(RecommendationRow.id == recommendation_id)
    ).first()
    if found is None:
        raise NotFound(f"no recommendation has id {recommendation_id}")
    return found[0], found[1]


def _not_proposed(recommendation_id: int, state: str, verb: str) -> Conflict:
    return Conflict(
        f"recommendation {recommendation_id} is {state}; only a proposed recommendation "
        f"can be {verb}",
        errors=[ErrorItem(field="state", message=f"is {state}, not proposed")],
    )


def _decide(session: Session, *, recommendation_id: int, values: dict[str, Any]) -> bool:
    """Move a recommendation out of ``proposed`` if it still is (False if not)."""
    done = session.execute(
        update(RecommendationRow)
        .where(RecommendationRow.id == recommendation_id, RecommendationRow.state == PROPOSED)
        .values(**values)
        .execution_options(synchronize_session=False)
    )
    return bool(done.rowcount)  # type: ignore[attr-defined]


def approve(
    session: Session,
    *,
    recommendation_id: int,
    actor_key_id: str | None,
    policy_id: int | None = None,
    price: float | None = None,
    note: str | None = None,
    effective_at: dt.datetime | None = None,
) -> Decision:
    """Approve a proposed recommendation at its price (or ``price``) from ``effective_at``
    (default now): it becomes the product's live price in the price record."""
    row, sku = _row_and_sku(session, recommendation_id)
    if row.state != PROPOSED:
        raise _not_proposed(recommendation_id, row.state, "approved")
    recommended = (row.result.get("recommended") or {}).get("price")
    chosen = price if price is not None else recommended
    if chosen is None or not chosen > 0:
        raise InvalidInput(
            "the recommendation has no usable price; approve it with a price",
            errors=[ErrorItem(field="price", message="required for this recommendation")],
        )
    now = utcnow()
    start = to_utc(effective_at) if effective_at is not None else now
    if start < now - CLOCK_SKEW:
        # The record says what was charged: a price cannot have gone live before it was
        # approved (a correction is a new entry from now on).
        raise InvalidInput(
            "a price cannot go live before it is approved; give an effective_at from now on",
            errors=[ErrorItem(field="effective_at", message="is in the past")],
        )
    breaches = rule_breaches(session, product_id=row.product_id, price=chosen, at=start)
    if breaches:
        raise Conflict(
            f"the price {chosen} breaks jurisdiction rules: {', '.join(breaches)}",
            errors=[ErrorItem(field="price", message=f"breaks {name}") for name in breaches],
        )
    values = {
        "state": APPROVED,
        "decided_at": now,
        "decided_by_key_id": actor_key_id,
        "policy_id": policy_id,
        "approved_price": chosen,
        "note": note,
    }
    if not _decide(session, recommendation_id=recommendation_id, values=values):
        state = session.scalar(
            select(RecommendationRow.state).where(RecommendationRow.id == recommendation_id)
        )
        raise _not_proposed(recommendation_id, str(state), "approved")
    entry = price_record.add_entry(
        session,
        product_id=row.product_id,
        price=chosen,
        effective_from=start,
        set_by_key_id=actor_key_id,
        policy_id=policy_id,
        recommendation_id=recommendation_id,
        fit_id=row.fit_id,
        note=note,
    )
    write_audit(
        session,
        actor_key_id=actor_key_id,
        action="approve_recommendation",
        subject=sku,
        details={
            "recommendation_id": recommendation_id,
            "price": chosen,
            "recommended_price": recommended,
            "effective_at": start.isoformat(),
            "fit_id": row.fit_id,
            "policy_id": policy_id,
            "note": note,
        },
        at=now,
    )
    return Decision(recommendation_id, sku, APPROVED, chosen, entry)


def decline(
    session: Session, *, recommendation_id: int, actor_key_id: str | None, note: str
) -> Decision:
    """Decline a proposed recommendation, with the reason."""
    row, sku = _row_and_sku(session, recommendation_id)
    now = utcnow()
    values = {"state": DECLINED, "decided_at": now, "decided_by_key_id": actor_key_id, "note": note}
    if not _decide(session, recommendation_id=recommendation_id, values=values):
        state = session.scalar(
            select(RecommendationRow.state).where(RecommendationRow.id == recommendation_id)
        )
        raise _not_proposed(recommendation_id, str(state or row.state), "declined")
    write_audit(
        session,
        actor_key_id=actor_key_id,
        action="decline_recommendation",
        subject=sku,
        details={"recommendation_id": recommendation_id, "note": note},
        at=now,
    )
    return Decision(recommendation_id, sku, DECLINED, None, None)


_SUPERSEDE = (
    update(RecommendationRow)
    .where(
        and_(
            RecommendationRow.product_id == bindparam("p_id"),
            RecommendationRow.state == PROPOSED,
            RecommendationRow.id < bindparam("newest"),
        )
    )
    .values(state=SUPERSEDED, decided_at=bindparam("now"))
)


def after_store(
    session: Session, stored: Sequence[tuple[int, int, str, dict[str, Any]]]
) -> dict[int, Decision]:
    """Newly stored recommendations ``(id, product id, sku, result)``: older proposed ones of
    their products are superseded, and each product's newest is approved at once when an
    approval policy covers it. Returns the approvals by recommendation id."""
    if not stored:
        return {}
    now = utcnow()
    newest: dict[int, tuple[int, str, dict[str, Any]]] = {}
    for rec_id, product_id, sku, result in stored:
        if product_id not in newest or rec_id > newest[product_id][0]:
            newest[product_id] = (rec_id, sku, result)
    session.connection().execute(
        _SUPERSEDE,
        [{"p_id": p, "newest": rec_id, "now": now} for p, (rec_id, _, _) in newest.items()],
    )
    policies = active_policies(session)
    if not policies:
        return {}
    families = dict(
        session.execute(
            select(ProductRow.id, ProductRow.family).where(ProductRow.id.in_(list(newest)))
        ).all()
    )
    decided: dict[int, Decision] = {}
    for product_id, (rec_id, sku, result) in sorted(newest.items()):
        policy = matching_policy(policies, sku=sku, family=families.get(product_id), result=result)
        if policy is not None:
            decision = _approve_by_policy(session, rec_id, policy)
            if decision is not None:
                decided[rec_id] = decision
    return decided


def _approve_by_policy(session: Session, rec_id: int, policy: Policy) -> Decision | None:
    try:
        with session.begin_nested():
            return approve(
                session,
                recommendation_id=rec_id,
                actor_key_id=None,
                policy_id=policy.id,
                note=f"approved by policy {policy.name!r}",
            )
    except (Conflict, InvalidInput) as exc:
        # The recommendation stays proposed for a person: say why no policy approved it.
        write_audit(
            session,
            actor_key_id=None,
            action="policy_left_for_review",
            subject=f"recommendation:{rec_id}",
            details={"policy_id": policy.id, "reason": exc.detail},
        )
        return None
