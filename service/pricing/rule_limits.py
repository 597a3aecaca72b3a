"""Jurisdiction rules as price limits: what the optimiser may recommend and what an
approval may set.

Each rule in effect becomes a floor, a ceiling or both, under the rule's name:

- ``no_sale_below_cost``: at least the unit cost;
- ``emergency_increase_cap`` (on the days of a declared emergency): at most
  ``max_increase_pct`` above the lowest price live in the ``window_days`` before;
- ``min_change_interval``: while fewer than ``min_interval_days`` days have passed since
  the live price last changed, exactly the live price (the price is held);
- ``prior_price_cap``: at most ``max_increase_pct`` above the lowest price live in the
  ``window_days`` (30) days before (the prior price of the price record).

Earlier prices come from the price record (:mod:`service.pricing.price_record`); a product
without one uses its current price as the reference of the caps. A rule that cannot be
worked out (no unit cost, no earlier price) does not limit the price, and the answer says
so. These limits are tools, not legal advice: local law and qualified advice decide.
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from models import NamedLimit
from service.core.errors import RULE_LIMIT_PREFIX, NotFound
from service.core.tables import ProductRow, utcnow
from service.pricing import price_record
from service.pricing.rules import (
    BELOW_COST,
    EMERGENCY_CAP,
    MIN_INTERVAL,
    PRIOR_PRICE_CAP,
    PRIOR_PRICE_DAYS,
    Rule,
    in_effect,
)

PREFIX = RULE_LIMIT_PREFIX
"""How a rule's limit is named to the library, so that its name comes back apart from the
business constraints'."""
TOLERANCE = 1e-9


@dataclass(frozen=True)
class RuleLimit:
    """One rule's limit on a product's price at a moment (None: no limit on that side)."""

    name: str
    kind: str
    low: float | None
    high: float | None
    detail: str


@dataclass(frozen=True)
class RuleLimits:
    """The limits of the rules in effect for a product, and the rules that could not be
    worked out (name, why)."""

    limits: tuple[RuleLimit, ...]
    not_applied: tuple[tuple[str, str], ...]

    def named_limits(self) -> tuple[NamedLimit, ...]:
        return tuple(NamedLimit(PREFIX + r.name, r.low, r.high) for r in self.limits)


@dataclass(frozen=True)
class ProductFacts:
    id: int
    sku: str
    family: str | None
    unit_cost: float | None
    current_price: float | None


def product_facts(session: Session, product_id: int) -> ProductFacts:
    found = session.execute(
        select(
            ProductRow.id,
            ProductRow.sku,
            ProductRow.family,
            ProductRow.unit_cost,
            ProductRow.current_price,
        ).where(ProductRow.id == product_id)
    ).first()
    if found is None:
        raise NotFound(f"no product has id {product_id}")
    return ProductFacts(*found)


def _reference(
    session: Session, product: ProductFacts, at: dt.datetime, days: int, current: float | None
) -> tuple[float | None, str]:
    lowest = price_record.prior_lowest_price(session, product.id, at, days)
    if lowest is not None:
        return lowest, f"the lowest price live in the {days} days before"
    return current, "the current price (no price record yet)"


def _limit(
    session: Session,
    rule: Rule,
    product: ProductFacts,
    at: dt.datetime,
    unit_cost: float | None,
    current: float | None,
) -> RuleLimit | str:
    """A rule's limit, or why it cannot be worked out."""
    if rule.kind == BELOW_COST:
        if unit_cost is None:
            return "the product has no unit cost"
        detail = f"at least the unit cost {unit_cost}"
        return RuleLimit(rule.name, rule.kind, unit_cost, None, detail)
    if rule.kind in (EMERGENCY_CAP, PRIOR_PRICE_CAP):
        days = rule.window_days or PRIOR_PRICE_DAYS
        reference, what = _reference(session, product, at, days, current)
        if reference is None:
            return "no earlier price is known"
        pct = rule.max_increase_pct or 0.0
        high = reference * (1.0 + pct / 100.0)
        return RuleLimit(
            rule.name, rule.kind, None, high, f"at most {pct:g}% above {reference}, {what}"
        )
    if rule.kind == MIN_INTERVAL:
        last = price_record.last_change(session, product.id, at)
        days = rule.min_interval_days or 0
        if last is None or at - last >= dt.timedelta(days=days):
            return RuleLimit(rule.name, rule.kind, None, None, "the interval has passed")
        live = price_record.live_price(session, product.id, at)
        assert live is not None, "a price changed, so one is live"
        until = (last + dt.timedelta(days=days)).isoformat()
        return RuleLimit(
            rule.name,
            rule.kind,
            live.price,
            live.price,
            f"held at the live price {live.price} until {until} (changed {last.isoformat()})",
        )
    raise AssertionError(f"unknown rule kind {rule.kind!r}")


def _utc(moment: dt.datetime) -> dt.datetime:
    """The same moment in UTC; a naive time is taken as UTC."""
    return moment.astimezone(dt.UTC) if moment.tzinfo else moment.replace(tzinfo=dt.UTC)


def limits_for(
    session: Session,
    product: ProductFacts,
    *,
    at: dt.datetime | None = None,
    unit_cost: float | None = None,
    current_price: float | None = None,
    known: Sequence[Rule] | None = None,
) -> RuleLimits:
    """The limits of the rules in effect for ``product`` at ``at`` (default now).
    ``unit_cost`` and ``current_price`` default to the product's. ``known``: the rules in
    effect at ``at`` for the whole catalogue, read once for many products (a job)."""
    moment = _utc(at) if at is not None else utcnow()
    cost = unit_cost if unit_cost is not None else product.unit_cost
    current = current_price if current_price is not None else product.current_price
    limits: list[RuleLimit] = []
    skipped: list[tuple[str, str]] = []
    found_rules = (
        in_effect(session, sku=product.sku, family=product.family, at=moment)
        if known is None
        else [r for r in known if r.applies(product.sku, product.family)]
    )
    for rule in found_rules:
        found = _limit(session, rule, product, moment, cost, current)
        if isinstance(found, str):
            skipped.append((rule.name, found))
        elif found.low is not None or found.high is not None:
            limits.append(found)
    return RuleLimits(tuple(limits), tuple(skipped))


def rule_breaches(session: Session, *, product_id: int, price: float, at: dt.datetime) -> list[str]:
    """The names of the rules that ``price`` would break as the product's live price from
    ``at``: what an approval asks before a price goes live."""
    product = product_facts(session, product_id)
    found = limits_for(session, product, at=at)
    return breaches(found.limits, price)


def breaches(limits: Sequence[RuleLimit], price: float) -> list[str]:
    out = []
    for limit in limits:
        below = limit.low is not None and price < limit.low * (1.0 - TOLERANCE)
        above = limit.high is not None and price > limit.high * (1.0 + TOLERANCE)
        if below or above:
            out.append(limit.name)
    return out


def split_binding(result: dict[str, Any], limits: RuleLimits) -> dict[str, Any]:
    """A recommendation's answer with the rules that bound it (``binding_rules``) told
    apart from the business constraints, the rules applied and those not worked out."""
    binding = list(result.get("binding_constraints") or [])
    rules = [n.removeprefix(PREFIX) for n in binding if n.startswith(PREFIX)]
    constraints = [n for n in binding if not n.startswith(PREFIX)]
    out = {
        **result,
        "binding_constraints": constraints,
        "binding_rules": rules,
        "rules_applied": [
            {"name": r.name, "kind": r.kind, "low": r.low, "high": r.high, "detail": r.detail}
            for r in limits.limits
        ],
        "rules_not_applied": [{"name": n, "reason": why} for n, why in limits.not_applied],
    }
    # Elsewhere (a conflict, an optimum on a bound) the library's text names a rule by
    # its limit's name: say "jurisdiction rule" instead of the prefix.
    out["summary"] = str(result.get("summary", "")).replace(PREFIX, "jurisdiction rule ")
    out["warnings"] = [
        {**w, "message": str(w.get("message", "")).replace(PREFIX, "jurisdiction rule ")}
        for w in result.get("warnings") or []
    ]
    if rules and result.get("optimum") == "held_by_constraint":
        held = ", ".join(rules)
        if constraints:
            out["summary"] = (
                f"Optimum held by a constraint and a jurisdiction rule: "
                f"{', '.join(constraints)}; {held}."
            )
        else:
            out["optimum"] = "held_by_rule"
            out["summary"] = f"Optimum held by a jurisdiction rule: {held}."
        grid = str(result.get("summary", "")).partition(". Best of ")[2]
        if grid:
            out["summary"] += f" Best of {grid}"
    return out


def family_answer(answer: dict[str, Any], products: Sequence[dict[str, Any]]) -> dict[str, Any]:
    """A family's answer with its products' rules told apart (see :func:`split_binding`):
    held by rules alone when no constraint holds a product or the family, and its summary
    naming rules as such."""
    out = {
        **answer,
        "summary": str(answer.get("summary", "")).replace(PREFIX, "jurisdiction rule "),
    }
    kinds = {p.get("optimum") for p in products}
    if (
        answer.get("optimum") == "held_by_constraint"
        and not answer.get("binding_constraints")
        and "held_by_rule" in kinds
        and kinds <= {"held_by_rule", "interior"}
    ):
        out["optimum"] = "held_by_rule"
    return out
